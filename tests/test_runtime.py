"""The notebook's runtime helpers (stepper/runtime/*.py) on their own, against values computed here
with plain sympy or taken from textbooks; each test sets the names the notebook's setup cell defines."""

from __future__ import annotations

import ast

import pytest
import sympy as sp

from stepper.runtime import MODULES, inlined_source
from stepper.runtime import ansatz as ansatz_runtime
from stepper.runtime import core, geodesics
from stepper.runtime import matter as matter_runtime

theta, phi, t, r = sp.symbols("theta phi t r", real=True)
rho, M = sp.symbols("rho M", positive=True)


def set_coordinates(module, names, symbols):
    module.coordinates = list(symbols)
    module.index_names = list(names)
    module.coordinate = dict(zip(names, symbols))
    module.dimension = len(symbols)


def fill_from_matrix(module, names, symbols, g):
    """metric, inverse_metric and metric_derivatives tables from a matrix, computed here with plain sympy."""
    for table in (module.metric, module.inverse_metric, module.metric_derivatives, module.christoffel,
                  module.riemann, module.ricci, module.einstein):
        table.clear()
    inverse = sp.simplify(g.inv())
    for i, a in enumerate(names):
        for j, b in enumerate(names):
            if g[i, j] != 0:
                module.metric[a, b] = g[i, j]
            if inverse[i, j] != 0:
                module.inverse_metric[a, b] = inverse[i, j]
            for k, c in enumerate(names):
                derivative = sp.diff(g[i, j], symbols[k])
                if derivative != 0:
                    module.metric_derivatives[c, a, b] = derivative


@pytest.fixture
def sphere():
    names = ["theta", "phi"]
    set_coordinates(core, names, [theta, phi])
    fill_from_matrix(core, names, [theta, phi], sp.diag(rho**2, rho**2 * sp.sin(theta)**2))
    return core


def test_every_runtime_module_has_its_inlined_part_and_it_parses():
    for module in MODULES:
        source = inlined_source(module)
        assert source.strip() and "import stepper" not in source
        ast.parse(source)


def test_component_reads_missing_entries_as_zero(sphere):
    assert core.component(core.metric, "theta", "theta") == rho**2
    assert core.component(core.metric, "theta", "phi") == 0


def test_vanishes_proves_trigonometric_identities_and_refuses_non_zero():
    # sin^2 + cos^2 = 1 and cosh^2 - sinh^2 = 1 (common practice)
    assert core.vanishes(sp.sin(theta)**2 + sp.cos(theta)**2 - 1)
    assert core.vanishes(sp.cosh(t)**2 - sp.sinh(t)**2 - 1)
    assert core.vanishes((r**2 - M**2) / (r - M) - r - M)
    assert not core.vanishes(sp.sin(theta)**2 - sp.cos(theta)**2)
    assert not core.vanishes(1 / r)


def test_sphere_christoffel_symbols(sphere):
    # Gamma^theta_phiphi = -sin cos, Gamma^phi_thetaphi = cot (Carroll, Spacetime and Geometry, sec. 3.2,
    # from memory)
    assert core.vanishes(core.christoffel_from_metric("theta", "phi", "phi") + sp.sin(theta) * sp.cos(theta))
    assert core.vanishes(core.christoffel_from_metric("phi", "theta", "phi") - sp.cos(theta) / sp.sin(theta))
    assert core.christoffel_from_metric("theta", "theta", "theta") == 0


def test_sphere_curvature_chain(sphere):
    # R^theta_phithetaphi = sin^2(theta), R = 2/rho^2 (Carroll, sec. 3.6, from memory)
    for a, b, c in core.every_index(3):
        core.christoffel[a, b, c] = core.christoffel_from_metric(a, b, c)
    for key in core.every_index(4):
        core.riemann[key] = core.riemann_from_christoffel(*key)
    assert core.vanishes(core.component(core.riemann, "theta", "phi", "theta", "phi") - sp.sin(theta)**2)
    for key in core.every_index(2):
        core.ricci[key] = core.ricci_from_riemann(*key)
    # R^a_b = delta^a_b / rho^2 on a sphere of radius rho (Gaussian curvature 1/rho^2; common practice)
    assert core.vanishes(core.mixed_from_lowered(core.ricci, "theta", "theta") - 1 / rho**2)
    assert core.vanishes(core.mixed_from_lowered(core.ricci, "phi", "phi") - 1 / rho**2)
    assert core.mixed_from_lowered(core.ricci, "theta", "phi") == 0
    scalar = core.scalar_from_ricci()
    assert core.vanishes(scalar - 2 / rho**2)
    core.scalar_curvature = scalar
    # in two dimensions G_ij = 0 (common practice)
    assert all(core.vanishes(core.einstein_from_ricci(i, j)) for i, j in core.every_index(2))


def test_verdict_raises_on_a_recorded_answer_the_residues_contradict(capsys):
    core.verdict("demo", True, {"zero": sp.sin(theta)**2 + sp.cos(theta)**2 - 1})
    with pytest.raises(AssertionError, match="recorded as holding"):
        core.verdict("demo", True, {"one": sp.Integer(1)})
    with pytest.raises(AssertionError, match="recorded as not holding"):
        core.verdict("demo", False, {"zero": sp.Integer(0)})
    core.verdict("demo", None, {"one": sp.Integer(1)})
    assert "undecided" in capsys.readouterr().out


def test_check_table_names_the_step_and_component():
    with pytest.raises(AssertionError, match=r"step christoffel.*component \('a',\)"):
        core.check_table("christoffel", {("a",): sp.Integer(1)}, lambda a: sp.Integer(2), [("a",)])


def test_index_sets_of_the_lowered_riemann_tensor():
    set_coordinates(core, ["t", "r", "theta", "phi"], [t, r, theta, phi])
    # n^2 (n^2 - 1) / 12 = 20 independent components in four dimensions, before the cyclic identity
    # (common practice); the runtime lists pairs a < b, c < d, (a, b) <= (c, d): 21 of them
    assert len(core.riemann_index_sets()) == 21
    assert len(core.index_pairs(strict=True)) == 6


def test_schwarzschild_frame_and_geodesic_helpers():
    # Static observers of Schwarzschild: e_(t) = (1 - 2M/r)^(-1/2) d_t, squared norm of w_(t) = -g^tt
    # (Hartle, Gravity, sec. 9.2, from memory); radial free fall du^r/dtau = -M/r^2 (E^2 ... ) checked here
    # through Gamma^r_tt = M (r - 2M)/r^3 (Carroll, eq. 5.53, from memory).
    names = ["t", "r", "theta", "phi"]
    symbols = [t, r, theta, phi]
    f = 1 - 2 * M / r
    g = sp.diag(-f, 1 / f, r**2, r**2 * sp.sin(theta)**2)
    for module in (core, matter_runtime, geodesics):
        set_coordinates(module, names, symbols)
    fill_from_matrix(core, names, symbols, g)
    vectors, norms, broken = matter_runtime.gram_schmidt_frame("t")
    assert broken is None
    assert core.vanishes(norms["t"] - 1 / f)
    assert core.vanishes(matter_runtime.inner_product(vectors["r"], vectors["r"]) - norms["r"])
    for a, b, c in core.every_index(3):
        value = core.christoffel_from_metric(a, b, c)
        if value != 0:
            core.christoffel[a, b, c] = value
    u = {name: sp.Symbol(f"u_{name}", real=True) for name in names}
    geodesics.velocity.clear()
    geodesics.velocity.update(u)
    acceleration = geodesics.geodesic_from_christoffel("r")
    expected = -(M * (r - 2 * M) / r**3) * u["t"]**2 + M / (r * (r - 2 * M)) * u["r"]**2 \
        + (r - 2 * M) * u["theta"]**2 + (r - 2 * M) * sp.sin(theta)**2 * u["phi"]**2
    assert core.vanishes(acceleration - expected)


def test_sign_decides_and_combined_answer():
    R = sp.Symbol("R", positive=True)
    matter_runtime.kappa = 8 * sp.pi
    assert matter_runtime.sign_decides(M**2 / R**4, True)
    assert matter_runtime.sign_decides(-M**2 / (8 * sp.pi * R**4), False)
    assert not matter_runtime.sign_decides(M - R, True)
    assert not matter_runtime.sign_decides(M**2 / r**4, False)  # r only real: r = 0 is allowed
    assert matter_runtime.combined_answer([True, True]) is True
    assert matter_runtime.combined_answer([True, None]) is None
    assert matter_runtime.combined_answer([None, False]) is False


def test_ansatz_helpers_find_the_unknowns_and_the_factors_that_cannot_vanish():
    # -A dt^2 + B dr^2 + r^2 dOmega^2: A and B divide the determinant, so neither can vanish on a solution;
    # an exponential never vanishes (common practice)
    A, B = sp.Function("A")(r), sp.Function("B")(r)
    names = ["t", "r", "theta", "phi"]
    set_coordinates(core, names, [t, r, theta, phi])
    fill_from_matrix(core, names, [t, r, theta, phi], sp.diag(-A, B, r**2, r**2 * sp.sin(theta)**2))
    ansatz_runtime.ansatz_unknowns = [A, B]
    ansatz_runtime.metric_determinant = -A * B * r**4 * sp.sin(theta)**2
    ansatz_runtime.index_names = names
    assert ansatz_runtime.involves_unknowns(A.diff(r) + r)
    assert not ansatz_runtime.involves_unknowns(r**2 + M)
    assert ansatz_runtime.cannot_vanish(A) and ansatz_runtime.cannot_vanish(B)
    assert ansatz_runtime.cannot_vanish(sp.exp(A))
    assert not ansatz_runtime.cannot_vanish(A.diff(r))


def test_metric_from_line_element_halves_cross_terms():
    # ds^2 = -du dv gives g_uv = g_vu = -1/2 (README, "Line element rules"; common practice), and
    # -(dt + w dx)^2 + dx^2 gives g_tx = -w, g_xx = 1 - w^2.
    u, v, x, w = sp.symbols("u v x w", real=True)
    du, dv, dt, dx = sp.symbols("du dv dt dx")
    set_coordinates(core, ["u", "v"], [u, v])
    assert core.metric_from_line_element(-du * dv, [du, dv]) == sp.Matrix([[0, -sp.Rational(1, 2)],
                                                                            [-sp.Rational(1, 2), 0]])
    set_coordinates(core, ["t", "x"], [t, x])
    g = core.metric_from_line_element(-(dt + w * dx)**2 + dx**2, [dt, dx])
    assert g == sp.Matrix([[-1, -w], [-w, 1 - w**2]])
    with pytest.raises(AssertionError, match="not quadratic"):
        core.metric_from_line_element(dt**2 + dt, [dt, dx])


def test_invariants_from_scratch_of_schwarzschild_and_de_sitter_static_patch():
    # Schwarzschild: R_ij = 0 and K = 48 M^2/r^6; the static patch of de Sitter, f = 1 - r^2/L^2:
    # R_ij = (3/L^2) g_ij, R = 12/L^2, K = 24/L^4 (Carroll sec. 5.2 and 8.2, from memory).
    names = ["t", "r", "theta", "phi"]
    symbols = [t, r, theta, phi]
    set_coordinates(ansatz_runtime, names, symbols)
    L = sp.Symbol("L", positive=True)
    for f, ricci_factor, scalar, kretschmann in ((1 - 2 * M / r, 0, 0, 48 * M**2 / r**6),
                                                 (1 - r**2 / L**2, 3 / L**2, 12 / L**2, 24 / L**4)):
        g = sp.diag(-f, 1 / f, r**2, r**2 * sp.sin(theta)**2)
        ricci, R, K = ansatz_runtime.invariants_from_scratch(g)
        assert sp.simplify(ricci - ricci_factor * g) == sp.zeros(4, 4)
        assert sp.simplify(R - scalar) == 0 and sp.simplify(K - kretschmann) == 0


def test_riemann_group_is_a_derivative_or_a_sum_of_christoffel_products(sphere):
    # On the sphere of radius rho: Gamma^theta_phiphi = -sin cos, Gamma^phi_thetaphi = cot (common practice);
    # R^theta_phithetaphi = d_theta Gamma^theta_phiphi - Gamma^theta_phiphi Gamma^phi_thetaphi = sin^2
    for a, b, c in core.every_index(3):
        value = core.christoffel_from_metric(a, b, c)
        if value != 0:
            core.christoffel[a, b, c] = value
    derivative = core.riemann_group(derivative=("theta", "theta", "phi", "phi"))
    products = core.riemann_group(products=[(("theta", "phi", "phi"), ("phi", "theta", "phi"))])
    assert core.vanishes(derivative - (sp.sin(theta)**2 - sp.cos(theta)**2))
    assert core.vanishes(products + sp.cos(theta)**2)
    assert core.vanishes(derivative - products - sp.sin(theta)**2)


def _fill_curvature_from_scratch(names, symbols, g):
    """metric, inverse_metric, christoffel and ricci tables and the scalar curvature, computed here with plain
    sympy (Carroll, Spacetime and Geometry, sec. 3.2-3.6, from memory)."""
    set_coordinates(core, names, symbols)
    fill_from_matrix(core, names, symbols, g)
    n = len(names)
    for a, b, c in core.every_index(3):
        value = core.christoffel_from_metric(a, b, c)
        if not core.vanishes(value):
            core.christoffel[a, b, c] = value
    for key in core.every_index(4):
        core.riemann[key] = core.riemann_from_christoffel(*key)
    for key in core.every_index(2):
        value = core.ricci_from_riemann(*key)
        if not core.vanishes(value):
            core.ricci[key] = value
    core.scalar_curvature = core.scalar_from_ricci()
    assert n == 3


def test_cotton_from_ricci_vanishes_on_r_times_s2_and_not_on_nil():
    # R x S^2 is conformally flat (dt^2 + dOmega^2 = (dr^2 + r^2 dOmega^2)/r^2 with r = e^t; common practice),
    # so its Cotton tensor vanishes (Eisenhart, Riemannian Geometry, sec. 28, from memory).
    names = ["t", "theta", "phi"]
    _fill_curvature_from_scratch(names, [t, theta, phi], sp.diag(1, 1, sp.sin(theta)**2))
    assert core.cotton_index_sets() == [(a, b, c) for a in names for b, c in
                                        (("t", "theta"), ("t", "phi"), ("theta", "phi"))]
    assert all(core.vanishes(core.cotton_from_ricci(*key)) for key in core.every_index(3))
    # Nil, dx^2 + dy^2 + (dz - x dy)^2, is not conformally flat (from memory); C_abc is antisymmetric in b, c,
    # trace-free g^ab C_abc = 0 and its cyclic sum C_abc + C_bca + C_cab vanishes (common practice).
    x, y, z = sp.symbols("x y z", real=True)
    names = ["x", "y", "z"]
    _fill_curvature_from_scratch(names, [x, y, z], sp.Matrix([[1, 0, 0], [0, 1 + x**2, -x], [0, -x, 1]]))
    C = {key: core.cotton_from_ricci(*key) for key in core.every_index(3)}
    assert any(not core.vanishes(value) for value in C.values())
    for a, b, c in core.every_index(3):
        assert core.vanishes(C[a, b, c] + C[a, c, b])
        assert core.vanishes(C[a, b, c] + C[b, c, a] + C[c, a, b])
    for c in names:
        assert core.vanishes(sum(core.component(core.inverse_metric, a, b) * C[a, b, c]
                                 for a in names for b in names))
    table = {}
    core.fill_cotton(table, {("x", "y", "z"): C["x", "y", "z"]})
    assert table == {("x", "y", "z"): C["x", "y", "z"], ("x", "z", "y"): -C["x", "y", "z"]}


def test_runtime_helpers_refuse_text_instead_of_parsing_it():
    # values reach the helpers as sympy objects stepper printed as code; a string is never parsed
    with pytest.raises(sp.SympifyError):
        core.expression("__import__('os')")
    with pytest.raises(sp.SympifyError):
        core.component({("t",): "1 + 1"}, "t")
    with pytest.raises(sp.SympifyError):
        core.vanishes("x - x")
    assert core.expression(2) == sp.Integer(2)
