"""The exact core holds exponentials and square roots: canonical forms, zero tests that are proofs, derivative
rules checked against sympy's diff by an independent numeric evaluation (mpmath at random rational points), the
refusals that keep it sound, the recorded reason when the slow path is taken, and the physics of metrics
written the way practitioners write them."""

from __future__ import annotations

import random

import mpmath
import pytest
import sympy

from stepper import derive, load_metric
from stepper.algebra import ExpressionArithmetic, FieldArithmetic, UnsupportedByField, choose_arithmetic

t, r, theta, phi, x, y, z = sympy.symbols("t r theta phi x y z", real=True)
M = sympy.Symbol("M", positive=True)
Phi, Lam = sympy.Function("Phi")(r), sympy.Function("Lambda")(r)
w = sympy.Function("w")(x, y)
R = sympy.sqrt(x**2 + y**2 + z**2)
u, v = sympy.symbols("u v")  # no assumptions: sympy leaves sqrt(u*v**2) alone


def _field(coordinates, expressions):
    return FieldArithmetic(coordinates, expressions)


# --------------------------------------------------------------------------------------------------------
# canonical forms and zero tests


def test_exponentials_multiply_by_adding_their_arguments():
    F = _field([t, r], [sympy.exp(2 * Phi), sympy.exp(r**2), sympy.exp(2 * Phi + r**2)])
    a, b = F.from_expr(sympy.exp(2 * Phi)), F.from_expr(sympy.exp(r**2))
    assert F.zero_test(a * b - F.from_expr(sympy.exp(2 * Phi + r**2))).vanishes is True
    assert F.zero_test(a * F.from_expr(sympy.exp(-2 * Phi)) - 1).vanishes is True
    assert F.zero_test(a - b).vanishes is False


def test_integer_multiples_fold_into_one_generator_and_negative_ones_into_the_denominator():
    F = _field([t, r], [sympy.exp(2 * Lam), sympy.exp(-2 * Lam), sympy.exp(4 * Lam)])
    generators = [g for g in F._originals if isinstance(g, sympy.exp)]
    assert generators == [sympy.exp(2 * Lam)]
    inverse = F.from_expr(sympy.exp(-2 * Lam))
    assert inverse.num == 1 and inverse.den != 1
    assert F.from_expr(sympy.exp(4 * Lam)) == F.from_expr(sympy.exp(2 * Lam)) ** 2
    # readable results: the exponential itself, never a generator name
    assert F.to_expr(inverse) == sympy.exp(-2 * Lam)


def test_rational_coefficients_share_one_generator():
    F = _field([t, r], [sympy.exp(Phi / 2), sympy.exp(Phi / 3)])
    six = F.from_expr(sympy.exp(Phi / 6))
    assert F.from_expr(sympy.exp(Phi / 2)) == six ** 3
    assert F.from_expr(sympy.exp(Phi)) == six ** 6


def test_a_root_squares_to_its_radicand_and_leaves_the_denominator():
    p = x**2 + y**2 + z**2
    F = _field([x, y, z], [R])
    s = F.from_expr(R)
    assert F.zero_test(s * s - F.from_expr(p)).vanishes is True
    inverse = 1 / (1 + s)
    assert inverse == F.from_expr((1 - R) / (1 - p))
    assert inverse.den.degree(F._gen_index[R]) <= 0
    assert F.from_expr(1 / R**3) == s / F.from_expr(p**2)
    assert F.to_expr(s) == R


def test_a_rational_radicand_is_held_without_an_absolute_value():
    F = _field([t, r], [sympy.sqrt(1 - 2 * M / r)])
    s = F.from_expr(sympy.sqrt(1 - 2 * M / r))
    assert F.zero_test(s * s - F.from_expr(1 - 2 * M / r)).vanishes is True
    assert F.zero_test(s * (1 / s) - 1).vanishes is True
    # d/dr sqrt(1 - 2M/r) = M / (r^2 sqrt(1 - 2M/r)) (calculus)
    assert F.zero_test(F.diff(s, 1) - F.from_expr(M / r**2) / s).vanishes is True


def test_hyperbolic_functions_meet_exponentials_of_their_argument():
    # cosh x + sinh x = exp x (common practice): the field must see it, so it writes both through exp.
    F = _field([x, y], [sympy.cosh(x), sympy.exp(x)])
    assert F.zero_test(F.from_expr(sympy.cosh(x) + sympy.sinh(x) - sympy.exp(x))).vanishes is True
    G = _field([x, y], [sympy.cosh(x * y)])
    assert G.zero_test(G.from_expr(sympy.cosh(x * y) ** 2 - sympy.sinh(x * y) ** 2 - 1)).vanishes is True


@pytest.mark.parametrize("expressions, named", [
    ([sympy.sqrt(x**2)], sympy.sqrt(x**2)),                               # |x|, sign unknown
    ([sympy.sqrt(u), sympy.sqrt(u * v**2)], sympy.sqrt(u * v**2)),        # |v| sqrt(u)
    ([sympy.sqrt(1 - sympy.sin(x)**2)], sympy.sqrt(1 - sympy.sin(x)**2)),  # |cos x|
    ([sympy.log(x)], sympy.log(x)),
    ([sympy.sin(x * y)], sympy.sin(x * y)),
    ([x ** sympy.Rational(1, 3)], x ** sympy.Rational(1, 3)),
    ([sympy.sqrt(1 + sympy.sqrt(x))], sympy.sqrt(x)),
])
def test_what_would_break_canonicity_is_refused_and_named(expressions, named):
    with pytest.raises(UnsupportedByField) as caught:
        _field([x, y, u, v], expressions)
    assert caught.value.subexpression == named
    assert str(named) in str(caught.value)


def test_exponentials_whose_arguments_add_up_to_a_constant_are_refused():
    # exp(x/(x+1)) exp(1/(x+1)) = e: the two would not be independent generators.
    with pytest.raises(UnsupportedByField):
        _field([x, y], [sympy.exp(x / (x + 1)), sympy.exp(1 / (x + 1))])


def test_the_slow_path_says_why():
    A = choose_arithmetic([t, r], [sympy.log(r), sympy.Integer(1)])
    assert isinstance(A, ExpressionArithmetic)
    assert A.slow_path_because["expression"] == sympy.log(r) and "logarithm" in A.slow_path_because["reason"]
    assert isinstance(choose_arithmetic([t, r], [sympy.exp(2 * Phi), R.subs(x, r)]), FieldArithmetic)


# --------------------------------------------------------------------------------------------------------
# derivative rules against sympy's diff, evaluated independently with mpmath


def _numeric(expr, point, functions):
    """expr at a point, the free functions replaced by fixed elementary functions, in 40-digit mpmath."""
    concrete = expr.subs(functions).doit()
    mpmath.mp.dps = 40
    value = sympy.lambdify(list(point), concrete, modules="mpmath")(*[mpmath.mpf(v.p) / v.q for v in point.values()])
    return value


@pytest.mark.parametrize("expression", [
    sympy.exp(2 * Phi) * sympy.sqrt(1 - 2 * M / r) / (1 + sympy.exp(-2 * Lam)),
    r**3 * sympy.exp(-M / r) + sympy.exp(Phi / 3) * sympy.sin(theta) ** 2,
    sympy.sqrt(r**2 + M**2) / (r + sympy.sqrt(r**2 + M**2) * sympy.exp(Lam)),
    sympy.exp(sympy.sin(theta) * r) * sympy.cos(theta) / (2 + sympy.sqrt(r + M)),
])
def test_derivatives_agree_with_sympy_at_random_points(expression):
    coordinates = [t, r, theta, phi]
    F = _field(coordinates, [expression])
    element = F.from_expr(expression)
    functions = {Phi: sympy.sin(r) + r**2 / 3, Lam: r / 5 + sympy.cos(r) / 7}
    rng = random.Random(20261202)
    for k in (1, 2):
        ours = F.to_expr(F.diff(element, k))
        second = F.to_expr(F.diff(F.diff(element, k), 1))
        for _ in range(3):
            point = {t: sympy.Rational(rng.randint(1, 9), 7), r: sympy.Rational(rng.randint(30, 90), 7),
                     theta: sympy.Rational(rng.randint(2, 20), 9), phi: sympy.Rational(1, 3), M: sympy.Rational(5, 4)}
            ref = _numeric(sympy.diff(expression, coordinates[k]), point, functions)
            assert abs(_numeric(ours, point, functions) - ref) <= mpmath.mpf(10) ** -30 * (1 + abs(ref))
            ref2 = _numeric(sympy.diff(expression, coordinates[k], r), point, functions)
            assert abs(_numeric(second, point, functions) - ref2) <= mpmath.mpf(10) ** -30 * (1 + abs(ref2))


# --------------------------------------------------------------------------------------------------------
# physics in the forms people write


def _metric(tmp_path, name, text):
    path = tmp_path / f"{name}.toml"
    path.write_text(text)
    return load_metric(path)


def _results_in(derivation, quantity):
    """A quantity's components with every symbol replaced by the test's own (names compared)."""
    mine = {s.name: s for s in (t, r, theta, phi, x, y, z, M)}
    out = {}
    for key, value in derivation.results[quantity].items():
        out[key] = value.subs({s: mine[s.name] for s in value.free_symbols if s.name in mine}, simultaneous=True)
    return out


def _same(a, b) -> bool:
    return sympy.simplify(sympy.expand(a - b)) == 0


@pytest.mark.slow  # derives an extra metric
def test_static_star_in_exponential_form_gives_the_textbook_einstein_tensor(tmp_path):
    metric = _metric(tmp_path, "star", 'title = "star"\ncoordinates = ["t", "r", "theta", "phi"]\n'
                     'line_element = "-exp(2*Phi(r))*dt^2 + exp(2*Lambda(r))*dr^2 + r^2*dtheta^2 + '
                     'r^2*sin(theta)^2*dphi^2"\n[symbols]\nr = "positive"\n'
                     '[functions]\nPhi = ["r"]\nLambda = ["r"]\n')
    derivation = derive(metric, curvature_invariants=False)
    assert derivation.arithmetic == "field"
    G = derivation.results["einstein"]
    rr = next(s for s in G["t,t"].free_symbols if s.name == "r")
    P, L = sympy.Function("Phi")(rr), sympy.Function("Lambda")(rr)
    dP, dL = sympy.diff(P, rr), sympy.diff(L, rr)
    # Carroll, Spacetime and Geometry, sec. 7.2 (static spherically symmetric interior; from memory):
    # G_tt = e^{2Phi}/r^2 d/dr[r (1 - e^{-2Lambda})], G_rr = 2 Phi'/r + (1 - e^{2Lambda})/r^2,
    # G_thth = r^2 e^{-2Lambda} (Phi'' + Phi'^2 - Phi' Lambda' + (Phi' - Lambda')/r).
    assert _same(G["t,t"], sympy.exp(2 * P) / rr**2 * sympy.diff(rr * (1 - sympy.exp(-2 * L)), rr))
    assert _same(G["r,r"], 2 * dP / rr + (1 - sympy.exp(2 * L)) / rr**2)
    assert _same(G["theta,theta"], rr**2 * sympy.exp(-2 * L) * (sympy.diff(P, rr, 2) + dP**2 - dP * dL + (dP - dL) / rr))


@pytest.mark.slow
def test_kerr_schild_schwarzschild_is_ricci_flat_with_the_known_kretschmann_scalar(tmp_path):
    metric = _metric(tmp_path, "ks", 'title = "ks"\ncoordinates = ["t", "x", "y", "z"]\n'
                     'line_element = "-dt^2 + dx^2 + dy^2 + dz^2 + 2*M/R*(dt + (x*dx + y*dy + z*dz)/R)^2"\n'
                     '[symbols]\nM = "positive"\n[abbreviations]\nR = "sqrt(x^2 + y^2 + z^2)"\n')
    derivation = derive(metric)
    assert derivation.arithmetic == "field"
    # g = eta + (2M/R) k k with k null is Schwarzschild (Carroll, Spacetime and Geometry, sec. 6.6, Kerr-Schild
    # form at a = 0): Ricci-flat, Kretschmann scalar 48 M^2 / R^6 (Carroll sec. 5.7; from memory).
    assert all(v == 0 for v in derivation.results.get("ricci", {}).values())
    K = _results_in(derivation, "kretschmann") if isinstance(derivation.results["kretschmann"], dict) else \
        derivation.results["kretschmann"]
    if isinstance(K, dict):
        K = next(iter(K.values()))
    K = K.subs({s: {"x": x, "y": y, "z": z, "M": M}[s.name] for s in K.free_symbols})
    point = {x: sympy.Rational(3, 2), y: sympy.Rational(-2, 3), z: sympy.Rational(5, 4), M: sympy.Rational(7, 5)}
    exact = (48 * M**2 / (x**2 + y**2 + z**2) ** 3).subs(point)
    assert abs(sympy.N(K.subs(point), 40) - exact) < sympy.Rational(1, 10**30)
    assert sympy.simplify(K - 48 * M**2 / (x**2 + y**2 + z**2) ** 3) == 0


@pytest.mark.slow  # derives an extra metric
def test_conformal_surface_in_exponential_form_has_the_known_scalar_curvature(tmp_path):
    metric = _metric(tmp_path, "surface", 'title = "surface"\ncoordinates = ["x", "y"]\n'
                     'line_element = "exp(2*w(x, y))*(dx^2 + dy^2)"\n[functions]\nw = ["x", "y"]\n')
    derivation = derive(metric, curvature_invariants=False)
    assert derivation.arithmetic == "field"
    scalar = derivation.results["scalar"]
    names = {s.name: s for s in scalar.free_symbols}
    X, Y = names.get("x", x), names.get("y", y)
    W = sympy.Function("w")(X, Y)
    # R = 2K, K = -e^{-2w} (w_xx + w_yy) for e^{2w}(dx^2 + dy^2) (from memory; do Carmo, Riemannian Geometry).
    assert _same(scalar, -2 * sympy.exp(-2 * W) * (sympy.diff(W, X, 2) + sympy.diff(W, Y, 2)))


def test_a_radicand_with_large_prime_factors_is_refused_not_factored():
    # Factoring a 2048-bit content could take hours; the field refuses it (the slow path then holds it).
    big = (2**127 - 1) * (2**89 - 1)
    with pytest.raises(UnsupportedByField):
        _field([x, y], [sympy.sqrt(big * x)])


@pytest.mark.slow  # derives an extra metric
def test_the_slow_path_reason_is_recorded_in_the_metric_step_and_survives_the_trace(tmp_path):
    from stepper.trace import load_trace, trace_json
    metric = _metric(tmp_path, "slow", 'title = "slow"\ncoordinates = ["t", "r"]\n'
                     'line_element = "-log(r)*dt^2 + dr^2"\n[symbols]\nr = "positive"\n')
    derivation = derive(metric, curvature_invariants=False)
    step = next(s for s in derivation.steps if s.quantity == "metric")
    because = step.params["slow_path_because"]
    assert "logarithm" in because["reason"] and because["expression"].func == sympy.log
    again = load_trace(trace_json(derivation))
    assert next(s for s in again.steps if s.quantity == "metric").params["slow_path_because"] == because
    fast = derive(_metric(tmp_path, "fast", 'title = "fast"\ncoordinates = ["t", "r"]\n'
                          'line_element = "-exp(2*r)*dt^2 + dr^2"\n'), curvature_invariants=False)
    assert "slow_path_because" not in next(s for s in fast.steps if s.quantity == "metric").params
