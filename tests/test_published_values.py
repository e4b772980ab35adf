"""stepper's results against values published in textbooks and papers.

Each check names its source beside it.  'from memory' marks values recalled
rather than copied from the page; 'common practice' marks facts of the trade.
A check passes only when the difference, brought to canonical form by
sympy's cancel() after writing cos^2 = 1 - sin^2, is exactly zero.
"""

from __future__ import annotations

from pathlib import Path

import pytest
import sympy as sp

from conftest import example_derivation
from stepper import Metric, derive, load_metric

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"


def example(name: str):
    """The shared, once-per-session derivation of an example (tests/conftest.py)."""
    return example_derivation(name)


def names(d) -> dict[str, sp.Expr]:
    out = {s.name: s for s in d.metric.coordinates + d.metric.parameters}
    out.update({f.func.__name__: f for f in d.metric.functions})
    return out


def exactly_equal(a: sp.Expr, b: sp.Expr) -> bool:
    difference = sp.expand_trig(sp.sympify(a) - sp.sympify(b))
    for x in difference.atoms(sp.cos):
        difference = difference.subs(x**2, 1 - sp.sin(x.args[0]) ** 2)
    difference = sp.cancel(sp.together(difference))
    if difference == 0:
        return True
    return sp.simplify(difference) == 0


def component(d, quantity: str, key: str) -> sp.Expr:
    return d.results[quantity].get(key, sp.Integer(0))


# --- two-dimensional surfaces -------------------------------------------------

def test_round_sphere_gaussian_and_scalar_curvature():
    # Sphere of radius rho: Gaussian curvature 1/rho^2, scalar curvature R = 2K = 2/rho^2.
    # Source: Carroll, Spacetime and Geometry, sec. 3.6 (from memory); do Carmo,
    # Differential Geometry of Curves and Surfaces, sec. 4-3 (from memory).
    d = example("round_sphere")
    rho = names(d)["rho"]
    assert exactly_equal(d.results["scalar"], 2 / rho**2)
    assert exactly_equal(d.results["sectional_curvature_if_constant"], 1 / rho**2)
    assert d.results["verdicts"]["constant_curvature"]["holds"] is True


def test_round_sphere_christoffel_symbols():
    # Gamma^theta_phiphi = -sin(theta) cos(theta), Gamma^phi_thetaphi = cot(theta).
    # Source: Carroll, Spacetime and Geometry, sec. 3.2 (from memory).
    d = example("round_sphere")
    theta = names(d)["theta"]
    assert exactly_equal(component(d, "christoffel", "theta,phi,phi"), -sp.sin(theta) * sp.cos(theta))
    assert exactly_equal(component(d, "christoffel", "phi,theta,phi"), sp.cos(theta) / sp.sin(theta))
    assert exactly_equal(component(d, "christoffel", "phi,phi,theta"), sp.cos(theta) / sp.sin(theta))


def test_hyperbolic_plane_curvature():
    # Upper half-plane L^2 (dx^2 + dy^2) / y^2: Gaussian curvature -1/L^2, so R = -2/L^2.
    # Source: do Carmo, Riemannian Geometry, ch. 8 (from memory); common practice.
    d = example("hyperbolic_plane")
    L = names(d)["L"]
    assert exactly_equal(d.results["scalar"], -2 / L**2)
    assert d.results["verdicts"]["constant_curvature"]["holds"] is True


# --- the exterior of a static star ---------------------------------------------

SCHWARZSCHILD_CHRISTOFFEL = {
    # Source: Carroll, Spacetime and Geometry, sec. 5.2, eq. (5.53) (from memory), with G = 1.
    "t,t,r": lambda M, r, th: M / (r * (r - 2 * M)),
    "r,t,t": lambda M, r, th: M * (r - 2 * M) / r**3,
    "r,r,r": lambda M, r, th: -M / (r * (r - 2 * M)),
    "theta,r,theta": lambda M, r, th: 1 / r,
    "r,theta,theta": lambda M, r, th: -(r - 2 * M),
    "phi,r,phi": lambda M, r, th: 1 / r,
    "r,phi,phi": lambda M, r, th: -(r - 2 * M) * sp.sin(th) ** 2,
    "theta,phi,phi": lambda M, r, th: -sp.sin(th) * sp.cos(th),
    "phi,theta,phi": lambda M, r, th: sp.cos(th) / sp.sin(th),
}


def test_schwarzschild_christoffel_symbols():
    d = example("compact_star_exterior")
    s = names(d)
    for key, published in SCHWARZSCHILD_CHRISTOFFEL.items():
        assert exactly_equal(component(d, "christoffel", key), published(s["M"], s["r"], s["theta"])), key
    # Every other independent component vanishes; with both orderings of the
    # lower pair, the nine listed ones make 13 non-zero entries.
    assert len(d.results["christoffel"]) == 13


def test_schwarzschild_riemann_components():
    # R^t_rtr = 2M/(r^2 (r - 2M)), R^t_thetattheta = -M/r, R^r_thetartheta = -M/r,
    # R^theta_phithetaphi = 2M sin^2(theta)/r.
    # Source: Carroll, Spacetime and Geometry, sec. 5.2, eq. (5.55) (from memory), G = 1.
    d = example("compact_star_exterior")
    s = names(d)
    M, r, th = s["M"], s["r"], s["theta"]
    assert exactly_equal(component(d, "riemann", "t,r,t,r"), 2 * M / (r**2 * (r - 2 * M)))
    assert exactly_equal(component(d, "riemann", "t,theta,t,theta"), -M / r)
    assert exactly_equal(component(d, "riemann", "r,theta,r,theta"), -M / r)
    assert exactly_equal(component(d, "riemann", "theta,phi,theta,phi"), 2 * M * sp.sin(th) ** 2 / r)


def test_schwarzschild_is_ricci_flat_with_kretschmann_48_m2_over_r6():
    # Vacuum solution; K = 48 M^2 / r^6.
    # Source: Carroll, Spacetime and Geometry, sec. 5.7 (from memory); MTW, Gravitation, ch. 31 (from memory).
    d = example("compact_star_exterior")
    s = names(d)
    assert d.results["verdicts"]["ricci_flat"]["holds"] is True
    assert d.results["ricci"] == {}
    assert exactly_equal(d.results["kretschmann"], 48 * s["M"] ** 2 / s["r"] ** 6)


def test_schwarzschild_trace_identity_values():
    # Gamma^l_lr = d_r ln sqrt|g| = 2/r and Gamma^l_ltheta = cot(theta) for sqrt|g| = r^2 sin(theta).
    # Source: common practice (direct from the determinant -r^4 sin^2(theta)).
    d = example("compact_star_exterior")
    s = names(d)
    step_r = d.step("contracted_christoffel/r").result
    step_theta = d.step("contracted_christoffel/theta").result
    assert exactly_equal(step_r["sum"], 2 / s["r"]) and exactly_equal(step_r["from_determinant"], 2 / s["r"])
    assert exactly_equal(step_theta["sum"], sp.cos(s["theta"]) / sp.sin(s["theta"]))


# --- cosmology -------------------------------------------------------------------

def test_flat_expanding_universe_ricci_and_scalar():
    # ds^2 = -dt^2 + a^2 (dx^2 + dy^2 + dz^2):
    # R_tt = -3 a''/a, R_xx = a a'' + 2 a'^2, R = 6 (a''/a + a'^2/a^2).
    # Source: Carroll, Spacetime and Geometry, sec. 8.3, eqs. (8.44)-(8.45) with k = 0 (from memory).
    d = example("expanding_dust_universe")
    s = names(d)
    a, t = s["a"], s["t"]
    a1, a2 = sp.diff(a, t), sp.diff(a, t, 2)
    assert exactly_equal(component(d, "ricci", "t,t"), -3 * a2 / a)
    for x in ("x", "y", "z"):
        assert exactly_equal(component(d, "ricci", f"{x},{x}"), a * a2 + 2 * a1**2)
    assert exactly_equal(d.results["scalar"], 6 * (a2 / a + a1**2 / a**2))


def test_flat_expanding_universe_einstein_tensor_gives_friedmann_equation():
    # G_tt = 3 (a'/a)^2, the left side of the first Friedmann equation with k = 0.
    # Source: Carroll, Spacetime and Geometry, sec. 8.3, eq. (8.46) (from memory).
    d = example("expanding_dust_universe")
    s = names(d)
    a, t = s["a"], s["t"]
    assert exactly_equal(component(d, "einstein", "t,t"), 3 * sp.diff(a, t) ** 2 / a**2)


def test_flat_expanding_universe_is_conformally_flat():
    # Robertson-Walker metrics are conformally flat.
    # Source: Hawking and Ellis, The Large Scale Structure of Space-Time, sec. 5.3 (from memory).
    d = example("expanding_dust_universe")
    assert d.results["verdicts"]["conformally_flat"]["holds"] is True
    assert d.results["weyl"] == {}


def test_de_sitter_flat_slicing_is_maximally_symmetric():
    # ds^2 = -dt^2 + e^{2Ht} dx^2: R = 12 H^2, R_ij = 3 H^2 g_ij, constant curvature H^2.
    # Source: Carroll, Spacetime and Geometry, sec. 8.2 (from memory).
    d = example("inflating_universe")
    H = names(d)["H"]
    assert exactly_equal(d.results["scalar"], 12 * H**2)
    assert d.results["verdicts"]["einstein_space"]["holds"] is True
    assert exactly_equal(d.results["einstein_constant"], 3 * H**2)
    assert d.results["verdicts"]["constant_curvature"]["holds"] is True


# --- rotating and higher-dimensional black holes -----------------------------------

@pytest.mark.slow  # the rotating black hole: a large example
def test_rotating_black_hole_is_ricci_flat():
    # The Kerr metric solves the vacuum equations.
    # Source: Kerr, Phys. Rev. Lett. 11, 237 (1963); Carroll, Spacetime and Geometry, sec. 6.6 (from memory).
    d = example("spinning_black_hole")
    assert d.results["verdicts"]["ricci_flat"]["holds"] is True
    assert d.results["ricci"] == {}
    assert d.results["scalar"] == 0


@pytest.mark.slow  # the rotating black hole: a large example
def test_rotating_black_hole_kretschmann():
    # K = 48 M^2 (r^6 - 15 r^4 a^2 c^2 + 15 r^2 a^4 c^4 - a^6 c^6) / Sigma^6, c = cos(theta).
    # Source: Henry, Astrophys. J. 535, 350 (2000), with Q = 0 (from memory).
    d = example("spinning_black_hole")
    s = names(d)
    M, a, r, c = s["M"], s["alpha"], s["r"], sp.cos(s["theta"])
    sigma = r**2 + a**2 * c**2
    published = 48 * M**2 * (r**6 - 15 * r**4 * a**2 * c**2 + 15 * r**2 * a**4 * c**4 - a**6 * c**6) / sigma**6
    assert exactly_equal(d.results["kretschmann"], published)


def test_five_dimensional_black_hole_kretschmann():
    # Tangherlini metric in D dimensions, f = 1 - mu/r^(D-3):
    # K = (D-1)(D-2)^2(D-3) mu^2 / r^(2(D-1)), so 72 mu^2 / r^8 for D = 5 (and 48 M^2/r^6 for D = 4, mu = 2M).
    # Source: Emparan and Reall, Living Rev. Rel. 11, 6 (2008), sec. 3.1 (from memory).
    d = example("five_dimensional_black_hole")
    s = names(d)
    assert d.results["verdicts"]["ricci_flat"]["holds"] is True
    assert exactly_equal(d.results["kretschmann"], 72 * s["mu"] ** 2 / s["r"] ** 8)


@pytest.mark.slow  # the twisted vacuum: a large example
def test_twisted_vacuum_is_ricci_flat():
    # The Taub-NUT metric, written with the cross term from (dt + 2 n cos(theta) dphi)^2, is a vacuum solution.
    # Source: Griffiths and Podolsky, Exact Space-Times, sec. 12.1 (from memory).
    d = example("twisted_vacuum")
    assert d.results["verdicts"]["ricci_flat"]["holds"] is True
    s = names(d)
    f = (s["r"] ** 2 - 2 * s["m"] * s["r"] - s["n"] ** 2) / (s["r"] ** 2 + s["n"] ** 2)
    assert exactly_equal(d.results["metric"]["t,phi"], -2 * s["n"] * f * sp.cos(s["theta"]))


def test_charged_black_hole_through_the_python_interface():
    # Reissner-Nordstrom, f = 1 - 2M/r + Q^2/r^2 (G = c = 1, Gaussian units):
    # R = 0 (traceless Maxwell stress), G_tt = Q^2 f / r^4, and
    # K = 8 (6 M^2 r^2 - 12 M Q^2 r + 7 Q^4) / r^8.
    # Source: Carroll, Spacetime and Geometry, sec. 6.5 (from memory); Henry, Astrophys. J. 535, 350 (2000) (from memory).
    t, th, ph = sp.symbols("t theta phi", real=True)
    r, M, Q = sp.symbols("r M Q", positive=True)
    f = 1 - 2 * M / r + Q**2 / r**2
    d = derive(Metric.from_matrix([t, r, th, ph], sp.diag(-f, 1 / f, r**2, r**2 * sp.sin(th) ** 2),
                                  title="charged hole"))
    assert d.results["scalar"] == 0
    assert d.results["verdicts"]["ricci_flat"]["holds"] is False
    assert exactly_equal(d.results["einstein"]["t,t"], Q**2 * f / r**4)
    assert exactly_equal(d.results["kretschmann"], 8 * (6 * M**2 * r**2 - 12 * M * Q**2 * r + 7 * Q**4) / r**8)


def test_three_sphere_has_constant_curvature():
    # Unit-radius-a 3-sphere: R_abcd = (1/a^2)(g_ac g_bd - g_ad g_bc), R = 6/a^2.
    # Source: Carroll, Spacetime and Geometry, sec. 3.9 (maximally symmetric spaces) (from memory).
    chi, th, ph = sp.symbols("chi theta phi", real=True)
    a = sp.Symbol("a", positive=True)
    g = sp.diag(a**2, a**2 * sp.sin(chi) ** 2, a**2 * sp.sin(chi) ** 2 * sp.sin(th) ** 2)
    d = derive(Metric.from_matrix([chi, th, ph], g))
    assert exactly_equal(d.results["scalar"], 6 / a**2)
    assert d.results["verdicts"]["constant_curvature"]["holds"] is True
    assert d.results["verdicts"]["einstein_space"]["holds"] is True
    # In three dimensions conformal flatness is decided by the Cotton tensor; a space of constant curvature is
    # conformally flat (Eisenhart, Riemannian Geometry, sec. 28, from memory).
    assert d.results["verdicts"]["conformally_flat"]["holds"] is True


@pytest.mark.slow  # every example, the large ones included
def test_every_example_satisfies_the_contracted_bianchi_identity_and_trace_identity():
    # nabla^i G_ij = 0 identically; Gamma^l_li = d_i ln sqrt|g|.
    # Source: Carroll, Spacetime and Geometry, sec. 3.7 and eq. (3.33) (from memory); common practice.
    for path in sorted(EXAMPLES.glob("*.toml")):
        d = example(path.stem)
        assert d.results["verdicts"]["bianchi"]["holds"] is True, path.stem
        assert d.step("contracted_christoffel").result.holds is True, path.stem
        assert d.step("ricci/agreement").result.holds is True, path.stem
        assert d.step("ricci/symmetry").result.holds is True, path.stem


def test_a_wrong_claim_would_be_caught():
    # The comparison used above is not vacuous: a published value with a slipped sign fails it.
    # Source: as test_schwarzschild_christoffel_symbols.
    d = example("compact_star_exterior")
    s = names(d)
    wrong = -s["M"] * (s["r"] - 2 * s["M"]) / s["r"] ** 3
    assert not exactly_equal(component(d, "christoffel", "r,t,t"), wrong)


@pytest.mark.slow
def test_charged_rotating_black_hole_kretschmann():
    # Kerr-Newman in Boyer-Lindquist coordinates: R = 0 and
    # K = 8/Sigma^6 [6 M^2 (r^6 - 15 a^2 r^4 c^2 + 15 a^4 r^2 c^4 - a^6 c^6)
    #                - 12 M Q^2 r (r^4 - 10 a^2 r^2 c^2 + 5 a^4 c^4) + Q^4 (7 r^4 - 34 a^2 r^2 c^2 + 7 a^4 c^4)].
    # Source: Henry, Astrophys. J. 535, 350 (2000), eq. (2) (from memory).
    d = derive(load_metric(EXAMPLES.parent / "bench" / "metrics" / "charged_rotating_black_hole.toml"))
    s = names(d)
    M, a, Q, r, c = s["M"], s["alpha"], s["Q"], s["r"], sp.cos(s["theta"])
    sigma = r**2 + a**2 * c**2
    published = 8 / sigma**6 * (
        6 * M**2 * (r**6 - 15 * a**2 * r**4 * c**2 + 15 * a**4 * r**2 * c**4 - a**6 * c**6)
        - 12 * M * Q**2 * r * (r**4 - 10 * a**2 * r**2 * c**2 + 5 * a**4 * c**4)
        + Q**4 * (7 * r**4 - 34 * a**2 * r**2 * c**2 + 7 * a**4 * c**4))
    assert d.results["scalar"] == 0
    assert exactly_equal(d.results["kretschmann"], published)


def test_absolute_value_in_a_metric_is_derived_and_verified():
    # -|x| dt^2 + dx^2 + dy^2 is, on each side of x = 0, a static metric -N^2 dt^2 + dx^2 with N = sqrt|x|,
    # whose scalar curvature is R = -2 N''/N = 1/(2 x^2) (common practice). Derivatives of |x| bring sign(x)
    # and DiracDelta(x); the numeric verification evaluates them away from x = 0.
    import sympy as sp
    from stepper import Metric
    from stepper.notebook import notebook_text
    t, x, y = sp.symbols("t x y", real=True)
    d = derive(Metric.from_matrix([t, x, y], sp.diag(-sp.Abs(x), 1, 1)))
    R = d.results["scalar"]
    for value in (sp.Rational(3, 2), -sp.Rational(2, 5), 7):
        assert sp.simplify(R.subs(x, value) - 1 / (2 * value**2)) == 0
    assert d.results["numeric_verification"]["passed"] is True
    assert "sign(" in notebook_text(d)
