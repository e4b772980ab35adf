"""In two dimensions R_ij = (R/2) g_ij holds for every metric; the Einstein verdict must say whether
lambda = R/2 is constant (a surface of constant curvature) or only satisfies that identity."""

from __future__ import annotations

import sympy

from stepper import derive, load_metric

from conftest import example_derivation


def test_a_surface_of_varying_curvature_is_qualified(tmp_path):
    # exp(2w)(dx^2 + dy^2) with w = x^2: K = -exp(-2w) (w_xx + w_yy) = -2 exp(-2x^2), R = 2K
    # (from memory: the Gaussian curvature of a conformally flat surface; e.g. do Carmo, Riemannian Geometry).
    (tmp_path / "surface.toml").write_text('title = "surface"\ncoordinates = ["x", "y"]\n'
                                           'line_element = "exp(2*x^2)*(dx^2 + dy^2)"\n')
    derivation = derive(load_metric(tmp_path / "surface.toml"))
    x = sympy.Symbol("x", real=True)
    scalar = derivation.results["scalar"]
    assert sympy.simplify(scalar.subs({s: x for s in scalar.free_symbols if s.name == "x"}) + 4 * sympy.exp(-2 * x**2)) == 0
    step = derivation.step("verdict/einstein_space")
    assert step.result.holds is True and step.params["lambda_constant"] is False
    assert "not constant" in step.result.evidence


def test_the_round_sphere_has_a_constant_lambda():
    # R = 2/rho^2 on a sphere of radius rho (common practice), so lambda = R/2 = 1/rho^2 is constant.
    step = example_derivation("round_sphere").step("verdict/einstein_space")
    assert step.result.holds is True and step.params["lambda_constant"] is True


def test_higher_dimensions_record_no_such_qualification():
    assert "lambda_constant" not in example_derivation("compact_star_exterior").step("verdict/einstein_space").params
