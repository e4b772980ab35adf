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


def _flat(module, names, symbols, g):
    """Set the coordinates and the metric tables in core and in ``module`` (a runtime module that star-imports core)."""
    set_coordinates(core, names, symbols)
    set_coordinates(module, names, symbols)
    fill_from_matrix(core, names, symbols, g)
    core.christoffel.clear()


def test_matter_model_helpers_in_flat_spacetime():
    from stepper.runtime import models as models_runtime
    x, y, z = sp.symbols("x y z", real=True)
    names, symbols = ["t", "x", "y", "z"], [t, x, y, z]
    _flat(models_runtime, names, symbols, sp.diag(-1, 1, 1, 1))
    density, pressure = sp.Function("rho")(t, x), sp.Function("p")(t, x)
    fluid = {"kind": "perfect fluid", "density": density, "pressure": pressure, "time": "t"}
    T = lambda a, b: models_runtime.model_stress_energy_from_declaration(fluid, a, b)
    # a fluid at rest in flat spacetime: T_ab = diag(rho, p, p, p) (common practice)
    assert [T(a, a) for a in names] == [density, pressure, pressure, pressure]
    assert T("t", "x") == 0
    models_runtime.model_stress_energy.clear()
    models_runtime.model_stress_energy.update({(a, a): T(a, a) for a in names})
    # d_a T^a_b: -d_t rho for b = t and d_x p for b = x (common practice: continuity and Euler at rest)
    assert core.vanishes(models_runtime.model_divergence("t") + sp.diff(density, t))
    assert core.vanishes(models_runtime.model_divergence("x") - sp.diff(pressure, x))
    # a uniform electric field E along x from A_t = -E x: energy density E^2/(8 pi), a tension -E^2/(8 pi)
    # along the field and a pressure +E^2/(8 pi) across it (Gaussian units; from memory)
    E = sp.Symbol("E", positive=True)
    field = {"kind": "electromagnetic field", "vector_potential": {"t": -E * x}}
    em = lambda a, b: sp.simplify(models_runtime.model_stress_energy_from_declaration(field, a, b))
    assert [em(a, a) for a in names] == [E**2 / (8 * sp.pi), -E**2 / (8 * sp.pi), E**2 / (8 * sp.pi),
                                         E**2 / (8 * sp.pi)]
    # a homogeneous scalar field: T_tt = phi'^2/2 + V, T_xx = phi'^2/2 - V (from memory)
    f = sp.Function("f")(t)
    V = f**2 / 2
    scalar = {"kind": "scalar field", "field": f, "potential": V}
    S = lambda a, b: models_runtime.model_stress_energy_from_declaration(scalar, a, b)
    assert core.vanishes(S("t", "t") - (f.diff(t)**2 / 2 + V))
    assert core.vanishes(S("x", "x") - (f.diff(t)**2 / 2 - V))


def test_matter_model_solved_check_refuses_a_wrong_form():
    from stepper.runtime import models as models_runtime
    x, y, z = sp.symbols("x y z", real=True)
    a = sp.Function("a")(t)
    names, symbols = ["t", "x", "y", "z"], [t, x, y, z]
    g = sp.diag(-1, a**2, a**2, a**2)
    _flat(models_runtime, names, symbols, g)
    for i, e in enumerate(names):  # Christoffel symbols of the flat FLRW metric, computed here
        for j, b in enumerate(names):
            for k, c in enumerate(names):
                value = core.christoffel_from_metric(e, b, c)
                if value != 0:
                    core.christoffel[e, b, c] = value
    density = sp.Function("rho")(t)
    dust = {"kind": "dust", "density": density, "time": "t"}
    models_runtime.model_stress_energy.clear()
    models_runtime.model_stress_energy["t", "t"] = models_runtime.model_stress_energy_from_declaration(dust, "t", "t")
    # dust: rho' = -3 (a'/a) rho (Carroll, Spacetime and Geometry, sec. 8.3)
    right = -3 * a.diff(t) / a * density
    equation = {"name": "continuity", "lhs": density.diff(t), "rhs": right, "source": "conservation",
                "component": ("t",), "replace": [(density.diff(t), right)]}
    models_runtime.check_model_solved("model/solved", [equation], [])
    wrong = dict(equation, rhs=-2 * a.diff(t) / a * density, replace=[(density.diff(t), -2 * a.diff(t) / a * density)])
    with pytest.raises(AssertionError):
        models_runtime.check_model_solved("model/solved", [wrong], [])


# ---------------------------------------------------------------------------
# The Weyl scalars and the algebraic type (stepper/runtime/petrov.py)
# ---------------------------------------------------------------------------

from stepper.runtime import petrov as petrov_runtime  # noqa: E402


def _petrov_answers(psi):
    """(O, N, D, III, II) questions answered from the runtime's elements: True when every element vanishes."""
    R = petrov_runtime
    invariant_i, invariant_j = R.weyl_invariants(psi)
    hessian = R.hessian_of_quartic(psi)

    def named(name):
        return R.petrov_elements(psi, invariant_i, invariant_j, hessian, name)
    minors = [f"h{i} f{j} - h{j} f{i}" for i in range(5) for j in range(i + 1, 5)]
    questions = ([f"Psi{k}" for k in range(5)], [f"h{k}" for k in range(5)], minors, ["I", "J"], ["I^3 - 27 J^2"])
    return [all(not named(name) for name in names) for names in questions]


@pytest.mark.parametrize("roots, expected", [
    ([1, 2, -3, sp.I], "I"), ([0, 0, 1, 2 + sp.I], "II"), ([1, 1, None, None], "D"), ([sp.I, sp.I, 3, 3], "D"),
    ([2, 2, 2, -1], "III"), ([None, None, None, 5], "III"), ([1 - sp.I] * 4, "N"), ([None] * 4, "N"), ([], "O"),
])
def test_petrov_type_follows_the_multiplicities_of_the_roots_of_the_quartic(roots, expected):
    # Source: Stephani et al., Exact Solutions (2nd ed.), sec. 4.2: the type is read from the multiplicities of
    # the roots of Psi0 + 4 Psi1 z + 6 Psi2 z^2 + 4 Psi3 z^3 + Psi4 z^4 (None: a root at infinity, where the
    # degree drops): {1,1,1,1} I, {2,1,1} II, {2,2} D, {3,1} III, {4} N, Weyl tensor zero O.
    R = petrov_runtime
    set_coordinates(R, ["t", "r", "theta", "phi"], [t, r, theta, phi])
    R.tetrad_order, R.tetrad_squares, R.tetrad_perfect_squares = [], {}, []
    R.use_petrov_field([])
    x, y = sp.symbols("x y")
    f = sp.Integer(0) if not roots else sp.Mul(*((y if z is None else x - z * y) for z in roots)) * (3 - 2 * sp.I)
    poly = sp.Poly(sp.expand(f), x, y)
    psi = {}
    for k in range(5):
        value = sp.expand(poly.coeff_monomial(x**k * y**(4 - k)) / sp.binomial(4, k))
        psi[f"Psi{k}"] = R.reduce_roots({(0, 0): R.field_into(sp.re(value)), (0, 1): R.field_into(sp.im(value))})
    assert R.petrov_type(_petrov_answers(psi)) == expected


def test_petrov_helpers_give_psi2_of_schwarzschild_in_the_static_tetrad():
    # R_trtr = -2M/r^3, R_t theta t theta = M f/r, R_r theta r theta = -M/(r f), R_theta phi theta phi
    # = 2 M r sin^2 theta (Schwarzschild in (-+++), a round sphere positive; MTW eq. 31.4 in the static frame,
    # from memory); in vacuum C = R.  With l, n = (e_t +- e_r)/sqrt2 and m = (e_theta + i e_phi)/sqrt2 only
    # Psi2 = -M/r^3 is non-zero (Griffiths & Podolsky, sec. 8.1).
    R = petrov_runtime
    names = ["t", "r", "theta", "phi"]
    set_coordinates(R, names, [t, r, theta, phi])
    f = 1 - 2 * M / r
    s2 = sp.sin(theta) ** 2
    R.metric.clear()
    R.metric.update({("t", "t"): -f, ("r", "r"): 1 / f, ("theta", "theta"): r**2, ("phi", "phi"): r**2 * s2})
    R.weyl.clear()
    R.weyl.update({("t", "r", "t", "r"): -2 * M / r**3, ("t", "theta", "t", "theta"): M * f / r,
                   ("t", "phi", "t", "phi"): M * f * s2 / r, ("r", "theta", "r", "theta"): -M / (r * f),
                   ("r", "phi", "r", "phi"): -M * s2 / (r * f), ("theta", "phi", "theta", "phi"): 2 * M * r * s2})
    order = ["phi", "theta", "r", "t"]
    w, N = R.gram_schmidt_tetrad(order)
    assert R.vanishes(N["t"] + f) and R.vanishes(N["phi"] - r**2 * s2)
    signs = {"phi": 1, "theta": 1, "r": 1, "t": -1}
    R.tetrad_order, R.tetrad_unnormalised = order, w
    R.tetrad_squares = {k: signs[k] * N[k] for k in order}
    R.tetrad_perfect_squares = []
    R.use_petrov_field(list(R.tetrad_squares.values()) + list(R.weyl.values()))
    R.tetrad_pairs = {"l": [("t", 1), ("r", 1)], "n": [("t", 1), ("r", -1)],
                      "m": [("theta", 1), ("phi", sp.I)], "b": [("theta", 1), ("phi", -sp.I)]}
    psi = {name: R.weyl_scalar_parts(name) for name in R.WEYL_SCALAR_SLOTS}
    for name in ("Psi0", "Psi1", "Psi3", "Psi4"):
        assert psi[name] == {}
    assert list(psi["Psi2"]) == [(0, 0)] and R.vanishes(R.field_out(psi["Psi2"][0, 0]) + M / r**3)
    invariant_i, invariant_j = R.weyl_invariants(psi)
    assert R.vanishes(R.field_out(invariant_i[0, 0]) - 3 * M**2 / r**6)
    assert R.vanishes(R.field_out(invariant_j[0, 0]) - M**3 / r**9)
    assert R.petrov_type(_petrov_answers(psi)) == "D"
    # a recorded part that differs (Psi2 = -2M/r^3) is refused
    wrong = {(0, 0): R.field_into(-2 * M / r**3)}
    with pytest.raises(AssertionError, match="Psi2"):
        R.check_parts("weyl_scalars", wrong, psi["Psi2"], "Psi2")
    R.check_parts("weyl_scalars", {(0, 0): R.field_into(-M / r**3)}, psi["Psi2"], "Psi2")


def test_petrov_point_mode_refuses_a_wrong_weyl_scalar_and_a_wrong_zero(monkeypatch):
    # The same Schwarzschild data as above (Psi2 = -M/r^3 only; Griffiths & Podolsky, sec. 8.1), with the
    # size threshold lowered so that the helpers compute at the exact rational point.
    R = petrov_runtime
    test_petrov_helpers_give_psi2_of_schwarzschild_in_the_static_tetrad()
    monkeypatch.setattr(R, "POINT_MODE_SIZE", 0)
    R.use_petrov_field(list(R.tetrad_squares.values()) + list(R.weyl.values()))
    assert R.petrov_mode == "point"
    psi = {name: R.weyl_scalar_parts(name) for name in R.WEYL_SCALAR_SLOTS}
    assert all(psi[name] == {} for name in ("Psi0", "Psi1", "Psi3", "Psi4"))
    assert R.petrov_type(_petrov_answers(psi)) == "D"
    R.check_parts("weyl_scalars", {(0, 0): R.field_into(-M / r**3)}, psi["Psi2"], "Psi2")
    with pytest.raises(AssertionError, match="Psi2"):
        R.check_parts("weyl_scalars", {(0, 0): R.field_into(-2 * M / r**3)}, psi["Psi2"], "Psi2")
    # a decision recording every Psi as zero (type O) is refused: Psi2 does not vanish at the point
    zero = {"vanishes": True, "elements": [f"Psi{k}" for k in range(5)], "decided_by": "", "test": {}}
    with pytest.raises(AssertionError, match="Psi2"):
        R.check_decision("algebraic_type", zero, lambda name: psi[name])
