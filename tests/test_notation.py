"""Notation a relativist expects in the typeset report (issue 12): dots for time derivatives, upper-index
velocities, sums whose sign reads naturally, the metric's abbreviations in results, and no symbol used for
two things. The expected LaTeX is standard notation written by hand (common practice), and every rewriting
is checked to be the same expression exactly."""

from __future__ import annotations

import pytest
import sympy

from conftest import example_derivation
from stepper.latex import ExpressionWriter, component_symbol

t, r, theta, phi = sympy.symbols("t r theta phi", real=True)
M, alpha = sympy.symbols("M alpha", positive=True)
a = sympy.Function("a")(t)
COORDINATES = (t, r, theta, phi)


def test_derivatives_by_time_are_dots_and_others_primes():
    # Common practice (FLRW, e.g. Carroll sec. 8.3): \dot a = da/dt; B'(r) for a radial function.
    w = ExpressionWriter(coordinates=COORDINATES, time=t)
    B = sympy.Function("B")(r)
    assert w.inline(sympy.Derivative(a, t)) == r"\dot{a}"
    assert w.inline(sympy.Derivative(a, (t, 2))) == r"\ddot{a}"
    assert w.inline(sympy.Derivative(a, t) ** 2) == r"\dot{a}^{2}"
    assert w.inline(sympy.Derivative(B, r)) == "B'"
    # without a time coordinate every function of one variable takes primes
    assert ExpressionWriter(coordinates=COORDINATES).inline(sympy.Derivative(a, t)) == "a'"


@pytest.mark.parametrize("name", ["Lambda", "Sum", "Integral", "Derivative"])
def test_a_free_function_named_like_a_sympy_class_is_an_atom(name):
    # e^{2 Lambda}, as in Tolman-Oppenheimer-Volkoff metrics (common practice), not e^{2 (Lambda)}
    f = sympy.Function(name)(r)
    tex = ExpressionWriter(coordinates=COORDINATES).inline(sympy.exp(2 * f))
    assert r"\left(" not in tex and tex.startswith("e^{2 ")


def test_denominators_are_sign_normalised_exactly():
    # Schwarzschild, Gamma^r_rr = -M / (r (r - 2M)) as students write it (Carroll eq. 5.x, from memory).
    w = ExpressionWriter(coordinates=COORDINATES)
    value = M / (r * (2 * M - r))
    assert w.inline(value) == r"- \frac{M}{r \left(r - 2 M\right)}"
    for expr in (value, M * (2 * M - r) / r**3, (2 * M - r) ** 2 / (r - M) ** 3, (2 * M - r) * (M - r) / r,
                 sympy.sin(theta) ** 2 * (2 * M - r) / (alpha - r) ** 5, 1 / (2 * M - r) + r / (M - 2 * r)):
        assert sympy.cancel(w.prepare(expr) - expr) == 0, expr
    # every printed factor that is a sum starts with a positive term
    assert r"\left(2 M - r\right)" not in w.inline(M * (2 * M - r) * sympy.Symbol("u") / r**3)


def test_velocities_carry_an_upper_index():
    velocities = {x.name: (sympy.Symbol(f"u_{x.name}", real=True), f"u^{{{sympy.latex(x)}}}") for x in COORDINATES}
    w = ExpressionWriter(coordinates=COORDINATES, velocities=velocities)
    assert component_symbol("geodesic_acceleration", ["r"], w) == r"\frac{du^{r}}{d\tau}"
    u_r = velocities["r"][0]
    assert w.inline(u_r**2) == r"\left(u^{r}\right)^{2}"


def test_the_kerr_metric_section_is_written_in_sigma_and_delta():
    # Boyer-Lindquist (Carroll eq. 6.70, from memory): g_tt = -(1 - 2Mr/Sigma), g_rr = Sigma/Delta,
    # g_phiphi = sin^2 theta ((r^2 + a^2) Sigma + 2 M r a^2 sin^2 theta) / Sigma.
    from stepper.report import report_model
    sigma = r**2 + alpha**2 * sympy.cos(theta) ** 2
    delta = r**2 - 2 * M * r + alpha**2
    g = sympy.zeros(4, 4)
    g[0, 0] = sympy.cancel(-(1 - 2 * M * r / sigma))
    g[1, 1] = sympy.cancel(sigma / delta)
    g[2, 2] = sigma
    g[3, 3] = sympy.cancel((r**2 + alpha**2 + 2 * M * r * alpha**2 * sympy.sin(theta) ** 2 / sigma)
                           * sympy.sin(theta) ** 2)
    w = ExpressionWriter([("Sigma", sigma), ("Delta", delta)], COORDINATES)
    for i in range(4):
        shown = w.prepare(g[i, i])
        assert shown.has(sympy.Symbol("Sigma")), i
        written_out = shown.subs({sympy.Symbol("Sigma"): sigma, sympy.Symbol("Delta"): delta})
        assert sympy.simplify(written_out - g[i, i]) == 0, i
    assert r"\Sigma" in w.inline(g[3, 3]) and "r^{4}" not in w.inline(g[3, 3])
    assert w.inline(g[1, 1]) == r"\frac{\Sigma}{\Delta}"


STAR = """
title = "Static star with two free functions"
coordinates = ["t", "r", "theta", "phi"]
line_element = "-exp(2*Phi(r))*dt^2 + exp(2*Lambda(r))*dr^2 + r^2*dtheta^2 + r^2*sin(theta)^2*dphi^2"

[symbols]
r = "positive"

[functions]
Phi = ["r"]
Lambda = ["r"]

[matter]
units = "geometric"
"""


@pytest.mark.slow  # derives an extra metric
def test_a_function_named_lambda_does_not_share_its_symbol_with_the_cosmological_constant(tmp_path):
    import re

    from stepper import derive, load_metric
    from stepper.exporters import ReportExporter
    (tmp_path / "star.toml").write_text(STAR, encoding="utf-8")
    tex = ReportExporter().export(derive(load_metric(tmp_path / "star.toml")))
    assert r"e^{2 {\Lambda}}" in tex and r"\left(\Lambda\right)" not in tex
    assert r"G_{ij} + \Lambda_{\mathrm{c}} g_{ij} = \kappa T_{ij}" in tex  # the convention, renamed
    assert "is not the cosmological constant, which is written" in tex
    # \Lambda outside braces would be the cosmological constant written as the metric's function: none is left
    assert not re.search(r"(?<!\{)\\Lambda(?![A-Za-z_])", tex)


def test_a_lambda_that_is_the_cosmological_constant_keeps_its_symbol():
    from stepper.exporters import ReportExporter
    tex = ReportExporter().export(example_derivation("closed_static_universe"))
    assert r"\mathrm{c}}" not in tex and "is not the cosmological constant" not in tex


def test_the_expanding_universe_report_uses_dots():
    from stepper.exporters import ReportExporter
    tex = ReportExporter().export(example_derivation("expanding_dust_universe"))
    assert r"\dot{a}" in tex and "a'" not in tex.split(r"\section{Conventions}")[0]
    assert r"derivatives by the time coordinate \(t\) are written with dots" in tex
