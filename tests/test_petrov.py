"""The Weyl scalars and the algebraic (Petrov) type (stepper.petrov) against published types, and the Weyl
scalars against an independent numeric computation (stepper/numeric.py)."""

from __future__ import annotations

import itertools
import random

import mpmath
import pytest
import sympy

from stepper import numeric as nc
from stepper.chain import derive
from stepper.metric import Metric
from tests.conftest import example_derivation

t, r, theta, phi = sympy.symbols("t r theta phi", real=True)
M = sympy.Symbol("M", positive=True)


def _derive(matrix, coordinates):
    return derive(Metric.from_matrix(coordinates, sympy.Matrix(matrix)))


def _type(derivation):
    return derivation.results["algebraic_type"]


def _exact(derivation) -> bool:
    """Every decision the type rests on was made exactly (canonical forms), none by sampling."""
    return all(d["test"]["how"] == "canonical form" for d in derivation.step("algebraic_type").params["decisions"])


@pytest.fixture(scope="module")
def static_black_hole():
    f = 1 - 2 * M / r
    rp = sympy.Symbol("r", positive=True)
    g = sympy.diag(-f, 1 / f, r**2, r**2 * sympy.sin(theta) ** 2).subs(r, rp)
    return _derive(g, (t, rp, theta, phi))


def test_static_black_hole_is_type_d_with_exact_evidence(static_black_hole):
    # Source: Stephani et al., Exact Solutions of Einstein's Field Equations (2nd ed.), ch. 15.4: the
    # Schwarzschild solution is of Petrov type D; Griffiths & Podolsky, Exact Space-Times, sec. 8.1.
    kind = _type(static_black_hole)
    assert kind["type"] == "D" and kind["holds"] is True
    assert _exact(static_black_hole)


def test_static_black_hole_weyl_scalars_in_the_static_tetrad(static_black_hole):
    # In the tetrad along the radial null directions only Psi_2 = -M/r^3 survives (Griffiths & Podolsky,
    # sec. 8.1, with Psi_2 = C_abcd k^a m^b mbar^c l^d; from memory).  I = 3 Psi_2^2, J = -Psi_2^3.
    psi = static_black_hole.results["weyl_scalars"]
    rp = next(s for s in static_black_hole.metric.coordinates if s.name == "r")
    for k in (0, 1, 3, 4):
        assert psi[f"Psi{k}"] == 0
    assert sympy.simplify(psi["Psi2"] + M / rp**3) == 0
    invariants = _type(static_black_hole)["invariants"]
    assert sympy.simplify(invariants["I"] - 3 * M**2 / rp**6) == 0
    assert sympy.simplify(invariants["J"] - M**3 / rp**9) == 0


def test_static_black_hole_real_part_of_i_is_a_sixteenth_of_the_kretschmann_scalar(static_black_hole):
    # Common practice: in vacuum C = R, and I = (C_abcd C^abcd - i C_abcd *C^abcd) / 16, so Re I = K / 16.
    invariants = _type(static_black_hole)["invariants"]
    kretschmann = static_black_hole.results["kretschmann"]
    assert sympy.simplify(sympy.re(sympy.expand(invariants["I"])) - kretschmann / 16) == 0


def test_expanding_universe_is_type_o():
    # Source: Stephani et al., ch. 14 (Robertson-Walker metrics are conformally flat, type O);
    # Griffiths & Podolsky, sec. 6.1.
    d = example_derivation("expanding_dust_universe")
    assert _type(d)["type"] == "O" and _type(d)["holds"] is True
    assert _exact(d)
    assert all(value == 0 for value in d.results["weyl_scalars"].values())


def test_plane_wave_is_type_n():
    # ds^2 = -A(u)(x^2 - y^2) du^2 - 2 du dv + dx^2 + dy^2, a vacuum pp-wave: type N
    # (Griffiths & Podolsky, sec. 17.1; Stephani et al., ch. 24).
    u, v, x, y = sympy.symbols("u v x y", real=True)
    A = sympy.Function("A")(u)
    g = sympy.Matrix([[-A * (x**2 - y**2), -1, 0, 0], [-1, 0, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1]])
    d = _derive(g, (u, v, x, y))
    kind = _type(d)
    assert kind["type"] == "N" and kind["holds"] is True
    assert kind["invariants"]["I"] == 0 and kind["invariants"]["J"] == 0
    # exactly one non-zero Weyl scalar in this tetrad? not required; but some Psi must be non-zero
    assert any(value != 0 for value in d.results["weyl_scalars"].values())


def test_two_dimensional_and_five_dimensional_metrics_have_no_weyl_scalars():
    # The Petrov classification is four-dimensional (common practice).
    for stem in ("round_sphere", "five_dimensional_black_hole"):
        d = example_derivation(stem)
        assert "weyl_scalars" not in d.results and "algebraic_type" not in d.results


def _numeric_weyl_scalars(metric_function, point, tetrad, dps=30):
    """Psi_k from stepper/numeric.py's Riemann tensor (a vacuum metric: C = R) and the tetrad at the point."""
    cv = nc.curvature(metric_function, point, dps=dps)
    n = cv.dim
    g = cv.metric
    low = {}
    for a, b, c, d in itertools.product(range(n), repeat=4):
        low[a, b, c, d] = mpmath.fsum(g[a, e] * cv.riemann[(e, b, c, d)] for e in range(n))
    slots = {"Psi0": "lmlm", "Psi1": "lnlm", "Psi2": "lmbn", "Psi3": "lnbn", "Psi4": "nbnb"}
    out = {}
    for name, which in slots.items():
        vectors = [tetrad[s] for s in which]
        out[name] = mpmath.fsum(low[a, b, c, d] * vectors[0][a] * vectors[1][b] * vectors[2][c] * vectors[3][d]
                                for a, b, c, d in itertools.product(range(n), repeat=4))
    return out


@pytest.mark.slow
def test_rotating_black_hole_is_type_d_and_i_is_that_of_kerr():
    # Source: Stephani et al., ch. 20 (Kerr is of type D); Griffiths & Podolsky, sec. 11.1: in the Kinnersley
    # tetrad Psi_2 = -m/(r - i a cos theta)^3, so I = 3 Psi_2^2 = 3 m^2/(r - i a cos theta)^6 and
    # J = -Psi_2^3 = m^3/(r - i a cos theta)^9, independent of the tetrad (from memory).
    d = example_derivation("spinning_black_hole")
    kind = _type(d)
    assert kind["type"] == "D"
    decisions = d.step("algebraic_type").params["decisions"]
    assert decisions[-1]["question"] == "hessian_proportional" and decisions[-1]["test"]["how"] == "canonical form"
    names = {s.name: s for s in d.metric.coordinates + tuple(d.metric.parameters)}
    mass, spin, radius, angle = names["M"], names["alpha"], names["r"], names["theta"]
    psi2 = -mass / (radius - sympy.I * spin * sympy.cos(angle)) ** 3
    rng = random.Random(14)
    for _ in range(3):
        point = {mass: sympy.Rational(rng.randint(5, 15), 10), spin: sympy.Rational(rng.randint(1, 9), 10),
                 radius: sympy.Rational(rng.randint(40, 90), 10), angle: sympy.Rational(rng.randint(3, 28), 10)}
        for name, expected in (("I", 3 * psi2**2), ("J", -psi2**3)):
            difference = sympy.N((kind["invariants"][name] - expected).subs(point), 30)
            assert abs(complex(difference)) < 1e-20 * max(1.0, abs(complex(sympy.N(expected.subs(point)))))


def test_weyl_scalars_agree_with_an_independent_numeric_computation(static_black_hole):
    # Independent numeric computation (stepper/numeric.py): finite-difference curvature contracted with the
    # recorded tetrad at random points outside the horizon.
    d = static_black_hole
    coords = d.metric.coordinates
    mass_value = sympy.Rational(3, 2)
    tetrad_exprs = d.step("null_tetrad").result

    def metric_function(x):
        rr, th = x[1], x[2]
        f = 1 - 2 * mpmath.mpf(mass_value.p) / mass_value.q / rr
        return [[-f, 0, 0, 0], [0, 1 / f, 0, 0], [0, 0, rr**2, 0], [0, 0, 0, rr**2 * mpmath.sin(th) ** 2]]

    rng = random.Random(1402)
    for _ in range(2):
        values = {coords[0]: sympy.Rational(rng.randint(1, 9), 10), coords[1]: sympy.Rational(rng.randint(40, 90), 10),
                  coords[2]: sympy.Rational(rng.randint(3, 28), 10), coords[3]: sympy.Rational(rng.randint(1, 9), 10)}
        subs = {**values, M: mass_value}
        tetrad = {}
        for key, name in (("l", "l"), ("n", "n"), ("m", "m"), ("b", "mbar")):
            tetrad[key] = [mpmath.mpc(complex(sympy.N(sympy.sympify(tetrad_exprs[name].get(c.name, 0)).subs(subs), 40)))
                           for c in coords]
        point = [mpmath.mpf(values[c].p) / values[c].q for c in coords]
        numeric = _numeric_weyl_scalars(metric_function, point, tetrad)
        for name, value in d.results["weyl_scalars"].items():
            symbolic = complex(sympy.N(sympy.sympify(value).subs(subs), 30))
            assert abs(complex(numeric[name]) - symbolic) < 1e-10, (name, numeric[name], symbolic)


def test_the_tetrad_of_the_metric_file_is_used_for_a_plane_wave():
    # examples/wave_train_platform.toml gives l = d_v, n = d_u - H/2 d_v, m = (d_x + i d_y)/sqrt2: the tetrad
    # adapted to the wave, in which only Psi_4 survives, from the part A(u) of H that is not a trace
    # (Griffiths & Podolsky, sec. 17.1: pp-waves are type N, Psi_4 from H_zeta zeta; from memory).
    d = example_derivation("wave_train_platform")
    assert d.step("weyl_scalars").uses[-1] != "null_tetrad"  # the user's tetrad, not one stepper built
    psi = d.results["weyl_scalars"]
    assert all(psi[f"Psi{k}"] == 0 for k in range(4))
    A = next(f for f in d.metric.functions if f.func.__name__ == "A")
    B = next(f for f in d.metric.functions if f.func.__name__ == "B")
    psi4 = sympy.sympify(psi["Psi4"])
    assert psi4 != 0 and psi4.has(A) and not psi4.has(B)
    assert not psi4.free_symbols & {s for s in d.metric.coordinates if s.name in ("x", "y")}
    assert _type(d)["type"] == "N" and _type(d)["holds"] is True
