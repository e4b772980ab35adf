"""The recorded geodesic equations against textbook equations and numeric orbits.

stepper records du^a/dtau = -Gamma^a_bc u^b u^c (summed over all b and c) with
u^a = dx^a/dtau written as the symbols u_t, u_r, ...  Each check names its
source: 'from memory' for recalled equations, 'common practice' for facts of
the trade.  The numeric checks integrate stepper's recorded right-hand sides
with scipy and compare with orbits known in closed form; nothing expected is
taken from stepper.
"""

from __future__ import annotations

import functools
import math
from pathlib import Path

import mpmath
import numpy as np
import pytest
import sympy as sp
from scipy.integrate import solve_ivp


from conftest import example_derivation
from stepper import numeric

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
COORDS = ("t", "r", "theta", "phi")


def example(name: str):
    """The shared, once-per-session derivation of an example (tests/conftest.py)."""
    return example_derivation(name)


def symbols_by_name(d) -> dict:
    """Coordinates, parameters and the velocity symbols u_x found in the recorded equations."""
    out = {s.name: s for s in d.metric.coordinates + d.metric.parameters}
    for value in d.results["geodesic_equations"].values():
        out.update({s.name: s for s in sp.sympify(value).free_symbols})
    return out


def exactly_equal(a, b) -> bool:
    difference = sp.expand_trig(sp.sympify(a) - sp.sympify(b))
    for c in difference.atoms(sp.cos):
        difference = difference.subs(c**2, 1 - sp.sin(c.args[0]) ** 2)
    difference = sp.cancel(sp.together(difference))
    return difference == 0 or sp.simplify(difference) == 0


# ------------------------------------------------------------------ Schwarzschild: the equations

def schwarzschild_christoffel(M, r, theta) -> dict:
    """Non-zero Gamma^a_bc (b <= c) of Schwarzschild, G = 1: Carroll, Spacetime and Geometry,
    sec. 5.4 (from memory); the same table is in MTW ch. 25 (from memory)."""
    return {
        ("t", "t", "r"): M / (r * (r - 2 * M)),
        ("r", "t", "t"): M * (r - 2 * M) / r**3,
        ("r", "r", "r"): -M / (r * (r - 2 * M)),
        ("r", "theta", "theta"): -(r - 2 * M),
        ("r", "phi", "phi"): -(r - 2 * M) * sp.sin(theta) ** 2,
        ("theta", "r", "theta"): 1 / r,
        ("theta", "phi", "phi"): -sp.sin(theta) * sp.cos(theta),
        ("phi", "r", "phi"): 1 / r,
        ("phi", "theta", "phi"): sp.cos(theta) / sp.sin(theta),
    }


def test_schwarzschild_geodesic_equations_match_the_textbook():
    # du^a/dtau = -Gamma^a_bc u^b u^c (Carroll sec. 3.4, from memory, common practice), with the table above.
    d = example("compact_star_exterior")
    s = symbols_by_name(d)
    M, r, theta = s["M"], s["r"], s["theta"]
    u = {x: s[f"u_{x}"] for x in COORDS}
    gamma = schwarzschild_christoffel(M, r, theta)
    for a in COORDS:
        expected = 0
        for (top, b, c), value in gamma.items():
            if top == a:
                expected -= (1 if b == c else 2) * value * u[b] * u[c]
        assert exactly_equal(d.results["geodesic_equations"][a], expected), a


def test_schwarzschild_radial_equation_written_out():
    # Carroll sec. 5.4 (from memory), the r-component of the geodesic equation:
    # d^2r/dtau^2 = -M (r - 2M)/r^3 (dt/dtau)^2 + M/(r (r - 2M)) (dr/dtau)^2
    #               + (r - 2M) [(dtheta/dtau)^2 + sin^2 theta (dphi/dtau)^2].
    d = example("compact_star_exterior")
    s = symbols_by_name(d)
    M, r, theta = s["M"], s["r"], s["theta"]
    ut, ur, uth, uph = (s[f"u_{x}"] for x in COORDS)
    expected = (-M * (1 - 2 * M / r) / r**2 * ut**2 + M / (r**2 * (1 - 2 * M / r)) * ur**2
                + (r - 2 * M) * (uth**2 + sp.sin(theta) ** 2 * uph**2))
    assert exactly_equal(d.results["geodesic_equations"]["r"], expected)
    step = d.step("geodesic_equations")
    assert step.result["velocity"]["r"] == d.results["geodesic_equations"]["r"]
    assert set(step.result["position"]) == set(COORDS)


def test_orbit_request_is_recorded_as_given():
    # The example's [orbit] table (M = 1, start r = 10, theta = pi/2, u^phi = 3/80, span 1000).
    d = example("compact_star_exterior")
    orbit = d.step("geodesic_equations").params["orbit"]
    assert orbit["kind"] == "timelike"
    assert sp.sympify(orbit["values"]["M"]) == 1
    assert sp.sympify(orbit["start"]["r"]) == 10
    assert sp.sympify(orbit["start"]["theta"]) == sp.pi / 2
    assert sp.sympify(orbit["velocity"]["phi"]) == sp.Rational(3, 80)
    assert sp.sympify(orbit["span"]) == 1000


# ------------------------------------------------------------------ Schwarzschild: numeric orbits

@functools.lru_cache(maxsize=None)
def schwarzschild_rhs(mass: float = 1.0):
    """The recorded first-order system dx^a/dtau = u^a, du^a/dtau = (stepper's accelerations)."""
    d = example("compact_star_exterior")
    s = symbols_by_name(d)
    variables = [s[x] for x in COORDS] + [s[f"u_{x}"] for x in COORDS]
    accelerations = [sp.sympify(d.results["geodesic_equations"][x]).subs(s["M"], mass) for x in COORDS]
    f = sp.lambdify(variables, accelerations, "numpy")

    def rhs(_tau, y):
        return np.concatenate([y[4:], np.array(f(*y), dtype=float)])

    return rhs


def circular_start(radius: float, omega: float, mass: float = 1.0):
    # u^t from g_ab u^a u^b = -1 with u^phi = omega u^t on the equator (common practice).
    ut = 1 / math.sqrt(1 - 2 * mass / radius - radius**2 * omega**2)
    return [0.0, radius, math.pi / 2, 0.0, ut, 0.0, 0.0, omega * ut]


def integrate(y0, tau_end, points=400):
    taus = np.linspace(0.0, tau_end, points)
    sol = solve_ivp(schwarzschild_rhs(), (0.0, tau_end), y0, method="DOP853", rtol=1e-11, atol=1e-12,
                    t_eval=taus)
    assert sol.success, sol.message
    return sol


def test_circular_orbit_at_ten_m_stays_circular():
    # Circular geodesics of Schwarzschild obey Kepler's law in coordinate time exactly:
    # dphi/dt = sqrt(M/r^3) (from memory; e.g. Hartle, Gravity, ch. 9; Carroll sec. 5.4),
    # and are stable for r > 6M.  Integrating stepper's equations for two orbits, r must stay 10M.
    M, R = 1.0, 10.0
    omega = math.sqrt(M / R**3)
    y0 = circular_start(R, omega)
    period_tau = 2 * math.pi / omega / y0[4]
    sol = integrate(y0, 2 * period_tau)
    r, t, phi = sol.y[1], sol.y[0], sol.y[3]
    assert np.max(np.abs(r - R)) < 1e-7
    assert np.max(np.abs(sol.y[2] - math.pi / 2)) < 1e-9  # cos(pi/2) is 6e-17 in floating point
    assert phi[-1] / t[-1] == pytest.approx(omega, rel=1e-9)
    assert phi[-1] == pytest.approx(4 * math.pi, rel=1e-9)
    # The same test discriminates: 1 % off Kepler's rate, the orbit is not circular.
    wrong = integrate(circular_start(R, 1.01 * omega), 2 * period_tau)
    assert np.max(np.abs(wrong.y[1] - R)) > 1e-2


def test_radial_infall_follows_the_cycloid():
    # Radial fall from rest at r0: r = (r0/2)(1 + cos eta), tau = sqrt(r0^3/(8M)) (eta + sin eta)
    # (MTW sec. 31.4, from memory; Hartle, Gravity, ch. 9, from memory).  And the conserved
    # energy E = (1 - 2M/r) dt/dtau (Carroll sec. 5.4, from memory) stays at sqrt(1 - 2M/r0).
    M, r0 = 1.0, 10.0
    y0 = [0.0, r0, math.pi / 2, 0.0, 1 / math.sqrt(1 - 2 * M / r0), 0.0, 0.0, 0.0]
    etas = np.array([math.pi / 4, math.pi / 2, 2 * math.pi / 3])
    taus = math.sqrt(r0**3 / (8 * M)) * (etas + np.sin(etas))
    sol = solve_ivp(schwarzschild_rhs(), (0.0, float(taus[-1])), y0, method="DOP853", rtol=1e-11,
                    atol=1e-12, t_eval=taus)
    assert sol.success, sol.message
    expected_r = r0 / 2 * (1 + np.cos(etas))
    assert np.max(np.abs(sol.y[1] - expected_r)) < 1e-7
    energy = (1 - 2 * M / sol.y[1]) * sol.y[4]
    assert np.max(np.abs(energy - math.sqrt(1 - 2 * M / r0))) < 1e-8


# ------------------------------------------------------------------ an off-diagonal metric

def taub_nut(m, n):
    """The example's twisted vacuum, written out here with mpmath (Taub-NUT; Griffiths &
    Podolsky, Exact Space-Times, sec. 12.1, from memory):
    -f (dt + 2 n cos(theta) dphi)^2 + dr^2/f + (r^2 + n^2) dOmega^2, f = (r^2 - 2 m r - n^2)/(r^2 + n^2)."""
    def metric(x):
        _t, r, theta, _phi = x
        f = (r**2 - 2 * m * r - n**2) / (r**2 + n**2)
        rho2 = r**2 + n**2
        c = 2 * n * mpmath.cos(theta)
        g = mpmath.zeros(4)
        g[0, 0] = -f
        g[0, 3] = g[3, 0] = -f * c
        g[1, 1] = 1 / f
        g[2, 2] = rho2
        g[3, 3] = -f * c**2 + rho2 * mpmath.sin(theta) ** 2
        return g
    return metric


@pytest.mark.slow  # finite differences at 30 digits
@pytest.mark.parametrize("point", [("1", "0.5", "4", "0.7"), ("2", "1.3", "7.5", "2.2")])
def test_cross_terms_against_numeric_christoffel_symbols(point):
    # du^a/dtau = -Gamma^a_bc u^b u^c summed over all b, c (Carroll sec. 3.4, from memory; common practice),
    # with Gamma^a_bc from finite differences of the metric written out above (stepper.numeric,
    # which shares no code with the symbolic route), for a metric with g_tphi != 0 so that the
    # cross terms count twice.
    d = example("twisted_vacuum")
    s = symbols_by_name(d)
    with mpmath.workdps(30):
        m, n, r, theta = (mpmath.mpf(v) for v in point)
        velocity = [mpmath.mpf("0.9"), mpmath.mpf("-0.3"), mpmath.mpf("0.25"), mpmath.mpf("0.4")]
        gamma = numeric.christoffel(taub_nut(m, n), [mpmath.mpf(0), r, theta, mpmath.mpf("0.1")])
        values = {s["m"]: m, s["n"]: n, s["r"]: r, s["theta"]: theta, s["t"]: 0, s["phi"]: mpmath.mpf("0.1")}
        values.update({s[f"u_{x}"]: v for x, v in zip(COORDS, velocity)})
        order = list(values)
        for a, x in enumerate(COORDS):
            expected = -mpmath.fsum(gamma[a, b, c] * velocity[b] * velocity[c] for b in range(4) for c in range(4))
            expr = sp.sympify(d.results["geodesic_equations"][x])
            got = sp.lambdify(order, expr, "mpmath")(*values.values())
            assert abs(got - expected) <= mpmath.mpf("1e-15") * (1 + abs(expected)), (x, got, expected)
