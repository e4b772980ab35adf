"""[matter.model]: the declared matter's stress-energy, its field equations, the conservation law and the
textbook forms (the Tolman-Oppenheimer-Volkoff equations of a static star and the Friedmann equations of a
homogeneous universe), each checked against a named textbook form by exact algebra."""

from __future__ import annotations

import pytest
import sympy as sp

from stepper import derive
from stepper.errors import InputError
from stepper.metricfile import metric_from_data

r = sp.Symbol("r", positive=True)
t, k, Lam = sp.symbols("t k Lambda", real=True)
theta = sp.Symbol("theta", real=True)


def zero(expr) -> bool:
    return sp.simplify(sp.together(expr)) == 0


def solved(derivation) -> dict:
    step = derivation.step("model/solved")
    return {eq["name"]: eq for eq in step.params["equations"]}


# the static star ------------------------------------------------------------------------------
def test_static_star_gives_the_tov_equations(derived):
    d = derived("fluid_star_interior")
    rho, p, m, Phi = (sp.Function(n)(r) for n in ("rho", "p", "m", "Phi"))
    eqs = solved(d)
    assert d.step("model/solved").params["shape"] == "static star"
    # Carroll, Spacetime and Geometry, sec. 5.8: dm/dr = 4 pi r^2 rho (G = 1)
    assert eqs["mass"]["lhs"] == sp.Derivative(m, r)
    assert zero(eqs["mass"]["rhs"] - 4 * sp.pi * r**2 * rho)
    # Carroll sec. 5.8: dPhi/dr = (m + 4 pi r^3 p) / (r (r - 2m))
    assert eqs["redshift"]["lhs"] == sp.Derivative(Phi, r)
    assert zero(eqs["redshift"]["rhs"] - (m + 4 * sp.pi * r**3 * p) / (r * (r - 2 * m)))
    # Carroll sec. 5.8 (hydrostatic equilibrium from div T = 0): dp/dr = -(rho + p) dPhi/dr
    assert eqs["conservation"]["lhs"] == sp.Derivative(p, r)
    assert zero(eqs["conservation"]["rhs"] + (rho + p) * sp.Derivative(Phi, r))
    # Carroll sec. 5.8, the Tolman-Oppenheimer-Volkoff equation
    assert zero(eqs["tov"]["rhs"] + (rho + p) * (m + 4 * sp.pi * r**3 * p) / (r * (r - 2 * m)))
    # the mass function defined by e^{-2 Lambda} = 1 - 2m/r (Carroll sec. 5.8)
    Lambda = sp.Function("Lambda")(r)
    definitions = dict((old, new) for old, new in d.step("model/solved").params["definitions"])
    assert zero(sp.exp(-2 * definitions[Lambda]) - (1 - 2 * m / r))


def test_static_star_stress_energy_and_conservation_law(derived):
    d = derived("fluid_star_interior")
    rho, p, Phi, Lambda = (sp.Function(n)(r) for n in ("rho", "p", "Phi", "Lambda"))
    T = d.results["model_stress_energy"]
    # Carroll sec. 5.8: T_tt = rho e^{2 Phi}, T_rr = p e^{2 Lambda}, T_theta theta = r^2 p
    assert zero(T["t,t"] - rho * sp.exp(2 * Phi))
    assert zero(T["r,r"] - p * sp.exp(2 * Lambda))
    assert zero(T["theta,theta"] - r**2 * p)
    assert zero(T["phi,phi"] - r**2 * sp.sin(theta)**2 * p)
    # Schutz, A First Course in GR, ch. 10: the only non-trivial component of div T = 0 is
    # (rho + p) dPhi/dr + dp/dr = 0; recorded component by component
    conservation = d.results["model_conservation"]
    assert set(conservation) == {"r"}
    assert zero(conservation["r"] - ((rho + p) * sp.Derivative(Phi, r) + sp.Derivative(p, r)))
    # the theta-theta equation follows from the others and the conservation law (contracted Bianchi identity;
    # Carroll sec. 5.8 uses the rr, tt equations and dp/dr)
    follows = d.step("model/conservation").params["follows"]
    assert list(follows) == ["theta,theta"]
    assert follows["theta,theta"]["bianchi_component"] == "r"
    assert d.step("model/conservation").params["independent"] == ["t,t", "r,r"]


# the homogeneous universe --------------------------------------------------------------------
def test_homogeneous_universe_gives_the_friedmann_equations(derived):
    d = derived("curved_fluid_universe")
    a, rho, p = (sp.Function(n)(t) for n in ("a", "rho", "p"))
    eqs = solved(d)
    assert d.step("model/solved").params["shape"] == "homogeneous universe"
    H2 = sp.Derivative(a, t)**2 / a**2
    # Carroll sec. 8.3, Friedmann equation (8.44 with the cosmological constant written out, from memory):
    # (a'/a)^2 = 8 pi rho / 3 - k / a^2 + Lambda / 3
    assert zero(eqs["friedmann"]["lhs"] - H2)
    assert zero(eqs["friedmann"]["rhs"] - (8 * sp.pi * rho / 3 - k / a**2 + Lam / 3))
    # Carroll sec. 8.3, acceleration equation: a''/a = -4 pi (rho + 3p) / 3 + Lambda / 3
    assert zero(eqs["acceleration"]["lhs"] - sp.Derivative(a, (t, 2)) / a)
    assert zero(eqs["acceleration"]["rhs"] - (-4 * sp.pi * (rho + 3 * p) / 3 + Lam / 3))
    # Carroll sec. 8.3, energy conservation: rho' = -3 (a'/a) (rho + p)
    assert eqs["continuity"]["lhs"] == sp.Derivative(rho, t)
    assert zero(eqs["continuity"]["rhs"] + 3 * sp.Derivative(a, t) / a * (rho + p))


def test_homogeneous_universe_conservation_law_and_dependence(derived):
    d = derived("curved_fluid_universe")
    a, rho, p = (sp.Function(n)(t) for n in ("a", "rho", "p"))
    conservation = d.results["model_conservation"]
    # Carroll sec. 8.3: the zero component of nabla_mu T^mu_nu = 0 is -d_t rho - 3 (a'/a)(rho + p); the spatial
    # components vanish identically for a homogeneous fluid at rest
    assert set(conservation) == {"t"}
    assert zero(conservation["t"] + sp.Derivative(rho, t) + 3 * sp.Derivative(a, t) / a * (rho + p))
    # common practice: the acceleration equation follows from the Friedmann equation, its derivative and the
    # continuity equation where a' is not zero
    follows = d.step("model/conservation").params["follows"]
    assert list(follows) == ["r,r"]
    assert follows["r,r"]["bianchi_component"] == "t"
    assert follows["r,r"]["never_vanishes"] is False
    # common practice: comoving perfect fluid T_ab = diag(rho, a^2 p / (1 - k r^2), a^2 r^2 p, ...)
    T = d.results["model_stress_energy"]
    assert zero(T["t,t"] - rho)
    assert zero(T["r,r"] - a**2 * p / (1 - k * r**2))


# the A(r), B(r) form of the star, dust, and the other models --------------------------------------
def _metric(line: str, coordinates, functions: dict, model: dict, symbols=None, lam="0"):
    return metric_from_data({"coordinates": coordinates, "line_element": line, "symbols": symbols or {"r": "positive"},
                             "functions": functions,
                             "matter": {"cosmological_constant": lam, "model": model}})


@pytest.mark.slow
@pytest.mark.parametrize("line, g_tt, g_rr", [
    ("-A(r)*dt^2 + B(r)*dr^2", "A", "B"),
    ("-exp(nu(r))*dt^2 + exp(lam(r))*dr^2", "nu", "lam"),   # the e^nu, e^lambda form of Oppenheimer and Volkoff (1939), from memory
])
def test_static_star_in_other_forms(line, g_tt, g_rr):
    metric = _metric(line + " + r^2*dtheta^2 + r^2*sin(theta)^2*dphi^2", ["t", "r", "theta", "phi"],
                     {g_tt: ["r"], g_rr: ["r"], "rho": ["r"], "P": ["r"]},
                     {"kind": "perfect fluid", "density": "rho", "pressure": "P"})
    d = derive(metric)
    rho, P, m, Phi = (sp.Function(n)(r) for n in ("rho", "P", "m", "Phi"))
    eqs = solved(d)
    # Carroll sec. 5.8 (as above), with -g_tt = e^{2 Phi} and g_rr = (1 - 2m/r)^{-1} put in
    assert zero(eqs["mass"]["rhs"] - 4 * sp.pi * r**2 * rho)
    assert zero(eqs["tov"]["rhs"] + (rho + P) * (m + 4 * sp.pi * r**3 * P) / (r * (r - 2 * m)))


@pytest.mark.slow
def test_electromagnetic_field_of_a_charged_black_hole_solves_every_field_equation():
    # Reissner-Nordstrom (Carroll sec. 6.5, geometric Gaussian units): f = 1 - 2M/r + Q^2/r^2 with A_t = -Q/r
    metric = _metric("-(1 - 2*M/r + Q^2/r^2)*dt^2 + dr^2/(1 - 2*M/r + Q^2/r^2) + r^2*dtheta^2 "
                     "+ r^2*sin(theta)^2*dphi^2", ["t", "r", "theta", "phi"], {},
                     {"kind": "electromagnetic field", "vector_potential": {"t": "-Q/r"}},
                     symbols={"r": "positive", "M": "positive", "Q": "real"})
    d = derive(metric)
    assert d.step("model/equations").result == {}
    assert len(d.step("model/equations").params["identically_zero"]) == 10
    # Carroll sec. 6.5: the field strength F_tr = Q / r^2 (sign of our A_t) and T trace-free
    params = d.step("model/stress_energy").params
    Q = sp.Symbol("Q", real=True)
    assert zero(params["field_strength"]["t,r"] + Q / r**2)
    assert d.results["model_conservation"] == {}


@pytest.mark.slow
def test_scalar_field_in_a_flat_universe_gives_its_friedmann_equation():
    metric = _metric("-dt^2 + a(t)^2*(dx^2 + dy^2 + dz^2)", ["t", "x", "y", "z"],
                     {"a": {"of": ["t"], "sign": "positive"}, "f": ["t"]},
                     {"kind": "scalar field", "field": "f", "potential": "mu^2*f^2/2"},
                     symbols={"mu": "positive"})
    d = derive(metric)
    a, f = sp.Function("a")(t), sp.Function("f")(t)
    mu = sp.Symbol("mu", positive=True)
    V = mu**2 * f**2 / 2
    tt = d.step("model/equations").result["t,t"]
    # Carroll sec. 8.7 (inflation): H^2 = (8 pi / 3) (f'^2 / 2 + V); the recorded equation is a non-zero
    # multiple of it free of the unknowns
    friedmann = (sp.Derivative(a, t) / a)**2 - 8 * sp.pi / 3 * (sp.Derivative(f, t)**2 / 2 + V)
    ratio = sp.simplify(tt / friedmann)
    assert ratio != 0 and not ratio.has(sp.Derivative) and not ratio.has(f)
    # Klein-Gordon equation f'' + 3 (a'/a) f' + dV/df = 0 (Carroll sec. 8.7) is div T = 0 divided by f'
    conservation = d.results["model_conservation"]["t"]
    kg = sp.Derivative(f, (t, 2)) + 3 * sp.Derivative(a, t) / a * sp.Derivative(f, t) + mu**2 * f
    assert zero(conservation + sp.Derivative(f, t) * kg) or zero(conservation - sp.Derivative(f, t) * kg)


# input ----------------------------------------------------------------------------------------
@pytest.mark.parametrize("model, words", [
    ({"kind": "plasma"}, "matter.model.kind"),
    ({"kind": "perfect fluid", "density": "rho"}, "needs 'pressure'"),
    ({"kind": "dust", "density": "rho", "pressure": "p"}, "unknown key 'pressure'"),
    ({"kind": "perfect fluid", "density": "rho", "pressure": "p", "velocity": {"w": "1"}}, "not a coordinate"),
    ({"kind": "electromagnetic field"}, "vector_potential"),
    ({"kind": "scalar field", "field": "nothing_declared"}, "nothing_declared"),
])
def test_bad_model_tables_are_refused(model, words):
    with pytest.raises(InputError, match=words):
        _metric("-dt^2 + a(t)^2*dx^2", ["t", "x"], {"a": ["t"], "rho": ["t"], "p": ["t"]}, model)


def test_a_model_survives_the_trace(derived):
    from stepper.trace import load_trace, trace_json
    d = derived("curved_fluid_universe")
    loaded = load_trace(trace_json(d))
    assert loaded.metric.matter.model == d.metric.matter.model
    assert loaded.step("model/solved").params == d.step("model/solved").params
