"""Agreement of stepper's symbolic curvature with an independent numeric computation.

Source of every reference value in this file: independent numeric computation
(stepper/numeric.py).  That module imports nothing from stepper and
does no symbolic algebra; it differentiates the metric numerically (central
differences in mpmath) and builds Christoffel symbols, Riemann, Ricci, the
scalar and the Kretschmann scalar from those numbers.

To keep the two routes apart, every example metric is written out again BY
HAND below as an mpmath callable; stepper's parsed metric is never turned into
a numeric function for the reference side.  Only stepper's *results* are
evaluated (sympy.lambdify to mpmath at 60 digits), after substituting the same
concrete parameter values (exact rationals on both sides) and, for a free
function such as a(t), the same concrete function.

Tolerance
---------
The reference runs at 50 significant digits (internally 130, steps ~1e-35),
so its results carry ~50 correct digits relative to the size of the
individual terms, and entries that vanish exactly come out as noise of order
1e-55 or less.  stepper's results are evaluated at 60 digits.  ``compare``
returns the largest relative deviation, with an absolute floor
F = 1e-20 * max(1, largest entry) for entries near zero (its default).

Observed (3 points per example): ~1e-51 relative for non-zero entries; for
components that vanish (e.g. Ricci and Einstein of the vacuum examples) the noise
is ~1e-41 of F; the Einstein tensor of the 2-d examples vanishes identically
and is formed here by cancellation from reference values rounded to 50
digits, which leaves ~1e-31 of F.  TOL = 1e-25 keeps a margin of 6 orders
above the worst of these, while a genuine error in a symbolic formula (relative
size 1e-2 or more, see test_comparison_detects_a_corrupted_component) exceeds
it by more than 20 orders of magnitude.
"""

from __future__ import annotations

import random
from fractions import Fraction
from pathlib import Path

import mpmath
import pytest
import sympy
from mpmath import mpf

from conftest import example_derivation
from stepper import numeric as nc
from stepper import derive, load_metric

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"

REF_DPS = 50          # digits of the numeric reference
EVAL_DPS = 60         # digits at which stepper's expressions are evaluated
FLOOR = mpf("1e-20")  # floor for compare() (its default), see the module docstring
TOL = mpf("1e-25")    # largest deviation allowed, see the module docstring
POINTS = 3            # random points per example
SEED = 20240611


def num(q: Fraction) -> mpf:
    """An exact rational as an mpf at the current precision."""
    return mpf(q.numerator) / q.denominator


# ----------------------------------------------------------------------------
# The example metrics, written out by hand.  Each ``metric(x, p)`` takes the
# coordinates in the order of the example file and a dict of parameter values
# (mpf at the current precision) and returns the matrix g_ij.
# ----------------------------------------------------------------------------

def round_sphere(x, p):
    th, _ph = x
    rho = p["rho"]
    return mpmath.matrix([[rho ** 2, 0], [0, rho ** 2 * mpmath.sin(th) ** 2]])


def hyperbolic_plane(x, p):
    _x, y = x
    L = p["L"]
    return mpmath.matrix([[L ** 2 / y ** 2, 0], [0, L ** 2 / y ** 2]])


def compact_star_exterior(x, p):
    _t, r, th, _ph = x
    M = p["M"]
    f = 1 - 2 * M / r
    g = mpmath.zeros(4, 4)
    g[0, 0] = -f
    g[1, 1] = 1 / f
    g[2, 2] = r ** 2
    g[3, 3] = r ** 2 * mpmath.sin(th) ** 2
    return g


def scale_factor(t):
    """The concrete a(t) used for the free function of expanding_dust_universe."""
    return mpmath.cosh(t) + t / 3


def expanding_dust_universe(x, p):
    t, _x, _y, _z = x
    a = scale_factor(t)
    return mpmath.diag([-1, a ** 2, a ** 2, a ** 2])


def ball_compactness(r):
    """The concrete q(r) used for the free function of anisotropic_ball: 0 <= q < 1 and q' >= 0 for r > 0,
    as its metric file declares."""
    return r ** 2 / (r ** 2 + 4)


def wave_train_platform(x, p):
    """The plane wave with the concrete profiles A(u) = 1 + u^2/5 and B(u) = 2 + u/7 (B >= 0 on the box, as
    its metric file declares): H = A (x^2 - y^2) + B (x^2 + y^2)."""
    u, _v, X, Y = x
    H = (1 + u ** 2 / 5) * (X ** 2 - Y ** 2) + (2 + u / 7) * (X ** 2 + Y ** 2)
    g = mpmath.zeros(4, 4)
    g[0, 0], g[0, 1], g[1, 0], g[2, 2], g[3, 3] = -H, -1, -1, 1, 1
    return g


def radiating_star_burst(x, p):
    """Outgoing Vaidya with the concrete mass m(u) = 1 - u/4 (positive, dm/du <= 0, as declared)."""
    u, r, th, _ph = x
    g = mpmath.zeros(4, 4)
    g[0, 0] = -(1 - 2 * (1 - u / 4) / r)
    g[0, 1] = g[1, 0] = -1
    g[2, 2], g[3, 3] = r ** 2, r ** 2 * mpmath.sin(th) ** 2
    return g


def fluid_star_interior(x, p):
    """The fluid star with the concrete Phi(r) = r^2/10 and Lambda(r) = r/7."""
    _t, r, th, _ph = x
    return mpmath.diag([-mpmath.exp(r ** 2 / 5), mpmath.exp(2 * r / 7), r ** 2, r ** 2 * mpmath.sin(th) ** 2])


def curved_fluid_universe(x, p):
    """The curved homogeneous universe with the concrete a(t) = 1 + t/5 + t^2/4 (positive on the box)."""
    t, r, th, _ph = x
    a = 1 + t / 5 + t ** 2 / 4
    return mpmath.diag([-1, a ** 2 / (1 - p["k"] * r ** 2), a ** 2 * r ** 2, a ** 2 * r ** 2 * mpmath.sin(th) ** 2])


def anisotropic_ball(x, p):
    _t, r, th, _ph = x
    return mpmath.diag([-1, 1 / (1 - ball_compactness(r)), r ** 2, r ** 2 * mpmath.sin(th) ** 2])


def spinning_black_hole(x, p):
    _t, r, th, _ph = x
    M, al = p["M"], p["alpha"]
    s, c = mpmath.sin(th), mpmath.cos(th)
    Sigma = r ** 2 + al ** 2 * c ** 2
    Delta = r ** 2 - 2 * M * r + al ** 2
    g = mpmath.zeros(4, 4)
    g[0, 0] = -(1 - 2 * M * r / Sigma)
    # the dt*dphi term of the line element is 2 g_tphi dt dphi
    g[0, 3] = g[3, 0] = -2 * M * al * r * s ** 2 / Sigma
    g[1, 1] = Sigma / Delta
    g[2, 2] = Sigma
    g[3, 3] = (r ** 2 + al ** 2 + 2 * M * r * al ** 2 * s ** 2 / Sigma) * s ** 2
    return g


def five_dimensional_black_hole(x, p):
    _t, r, chi, th, _ph = x
    mu = p["mu"]
    f = 1 - mu / r ** 2
    sc, st = mpmath.sin(chi), mpmath.sin(th)
    return mpmath.diag([-f, 1 / f, r ** 2, r ** 2 * sc ** 2, r ** 2 * sc ** 2 * st ** 2])


def twisted_vacuum(x, p):
    _t, r, th, _ph = x
    m, n = p["m"], p["n"]
    f = (r ** 2 - 2 * m * r - n ** 2) / (r ** 2 + n ** 2)
    s, c = mpmath.sin(th), mpmath.cos(th)
    g = mpmath.zeros(4, 4)
    # -f (dt + 2 n cos(theta) dphi)^2 expanded by hand
    g[0, 0] = -f
    g[0, 3] = g[3, 0] = -2 * n * f * c
    g[1, 1] = 1 / f
    g[2, 2] = r ** 2 + n ** 2
    g[3, 3] = (r ** 2 + n ** 2) * s ** 2 - 4 * n ** 2 * f * c ** 2
    return g


def inflating_universe(x, p):
    t, _x, _y, _z = x
    e = mpmath.exp(2 * p["H"] * t)
    return mpmath.diag([-1, e, e, e])


def closed_static_universe(x, p):
    _t, chi, th, _ph = x
    a = p["a"]
    sc, st = mpmath.sin(chi), mpmath.sin(th)
    return mpmath.diag([-1, a ** 2, a ** 2 * sc ** 2, a ** 2 * sc ** 2 * st ** 2])


def wormhole_passage(x, p):
    _t, r, th, _ph = x
    b0 = p["b0"]
    return mpmath.diag([-1, 1 / (1 - b0 ** 2 / r ** 2), r ** 2, r ** 2 * mpmath.sin(th) ** 2])


def exterior_from_ansatz_A(t, r, th, ph):
    """The concrete A(r) used for the free function of exterior_from_ansatz (positive on the box)."""
    return 1 + r / 3 + r ** 2 / 7


def exterior_from_ansatz_B(t, r, th, ph):
    return 2 + r ** 2 / 5


def exterior_from_ansatz(x, p):
    t, r, th, ph = x
    return mpmath.diag([-exterior_from_ansatz_A(t, r, th, ph), exterior_from_ansatz_B(t, r, th, ph),
                        r ** 2, r ** 2 * mpmath.sin(th) ** 2])


# name -> metric callable, parameter values, coordinate boxes for the random
# points, and sympy replacements for free functions (name -> function of the
# coordinate symbols).  Parameter values respect the declared assumptions
# (all positive), and the boxes keep away from horizons and coordinate
# singularities: theta in (0.3, 2.8); r well outside the outer horizon
# (compact_star_exterior: 2M = 1.4; spinning_black_hole: r_+ ~ 1.19 and the
# ergoregion ends at 2M = 1.4; five_dimensional_black_hole: sqrt(mu) ~ 0.89;
# twisted_vacuum: f > 0 for r > m + sqrt(m^2 + n^2) ~ 1.51).
THETA = (0.3, 2.8)
PHI = (0.0, 6.2)
CASES = {
    "round_sphere": dict(
        metric=round_sphere, params={"rho": Fraction(17, 10)},
        boxes=[THETA, PHI]),
    "hyperbolic_plane": dict(
        metric=hyperbolic_plane, params={"L": Fraction(13, 10)},
        boxes=[(-2.0, 2.0), (0.5, 3.0)]),
    "compact_star_exterior": dict(
        metric=compact_star_exterior, params={"M": Fraction(7, 10)},
        boxes=[(-1.0, 1.0), (3.0, 6.0), THETA, PHI]),
    "expanding_dust_universe": dict(
        metric=expanding_dust_universe, params={},
        boxes=[(-1.0, 1.0), (-2.0, 2.0), (-2.0, 2.0), (-2.0, 2.0)],
        # a(t) = cosh(t) + t/3 > 0 on the box; all its derivatives are non-zero there
        functions={"a": lambda t, x, y, z: sympy.cosh(t) + t / 3}),
    "spinning_black_hole": dict(
        metric=spinning_black_hole, params={"M": Fraction(7, 10), "alpha": Fraction(1, 2)},
        boxes=[(-1.0, 1.0), (3.0, 6.0), THETA, PHI]),
    "five_dimensional_black_hole": dict(
        metric=five_dimensional_black_hole, params={"mu": Fraction(4, 5)},
        boxes=[(-1.0, 1.0), (1.5, 4.0), (0.3, 2.8), THETA, PHI]),
    "twisted_vacuum": dict(
        metric=twisted_vacuum, params={"m": Fraction(7, 10), "n": Fraction(2, 5)},
        boxes=[(-1.0, 1.0), (3.0, 6.0), THETA, PHI]),
    "inflating_universe": dict(
        metric=inflating_universe, params={"H": Fraction(3, 5)},
        boxes=[(-1.0, 1.0), (-2.0, 2.0), (-2.0, 2.0), (-2.0, 2.0)]),
    "closed_static_universe": dict(
        metric=closed_static_universe, params={"a": Fraction(3, 2)},
        boxes=[(-1.0, 1.0), (0.3, 2.8), THETA, PHI]),
    "wormhole_passage": dict(
        # outside the throat r = b0 = 1.1, where 1 - b0^2/r^2 > 0
        metric=wormhole_passage, params={"b0": Fraction(11, 10)},
        boxes=[(-1.0, 1.0), (2.0, 6.0), THETA, PHI]),
    "anisotropic_ball": dict(
        metric=anisotropic_ball, params={},
        boxes=[(-1.0, 1.0), (0.5, 3.0), THETA, PHI],
        functions={"q": lambda t, r, th, ph: r ** 2 / (r ** 2 + 4)}),
    "exterior_from_ansatz": dict(
        metric=exterior_from_ansatz, params={},
        boxes=[(-1.0, 1.0), (1.0, 4.0), THETA, PHI],
        functions={"A": lambda t, r, th, ph: 1 + r / 3 + r ** 2 / 7,
                   "B": lambda t, r, th, ph: 2 + r ** 2 / 5}),
    "wave_train_platform": dict(
        metric=wave_train_platform, params={},
        boxes=[(-1.0, 1.0), (-1.0, 1.0), (-2.0, 2.0), (-2.0, 2.0)],
        functions={"A": lambda u, v, x, y: 1 + u ** 2 / 5, "B": lambda u, v, x, y: 2 + u / 7}),
    "fluid_star_interior": dict(
        metric=fluid_star_interior, params={},
        boxes=[(-1.0, 1.0), (0.5, 3.0), THETA, PHI],
        functions={"Phi": lambda t, r, th, ph: r ** 2 / 10, "Lambda": lambda t, r, th, ph: r / 7,
                   "rho": lambda t, r, th, ph: 1 / (1 + r ** 2), "p": lambda t, r, th, ph: 1 / (5 + r ** 2)}),
    "curved_fluid_universe": dict(
        # k = 1/3 and r < 1.5 keep 1 - k r^2 > 0
        metric=curved_fluid_universe, params={"k": Fraction(1, 3)},
        boxes=[(-1.0, 1.0), (0.3, 1.5), THETA, PHI],
        functions={"a": lambda t, r, th, ph: 1 + t / 5 + t ** 2 / 4, "rho": lambda t, r, th, ph: 1 / (2 + t),
                   "p": lambda t, r, th, ph: 1 / (6 + t)}),
    "radiating_star_burst": dict(
        metric=radiating_star_burst, params={},
        boxes=[(-1.0, 1.0), (3.0, 6.0), THETA, PHI],
        functions={"m": lambda u, r, th, ph: 1 - u / 4}),
}


# ----------------------------------------------------------------------------
# Helpers
# ----------------------------------------------------------------------------

_DERIVATIONS: dict = {}


def derivation(name):
    if name not in _DERIVATIONS:
        _DERIVATIONS[name] = example_derivation(name)
    return _DERIVATIONS[name]


def hand_metric(name):
    """The hand-written metric of ``name`` as a one-argument callable for the reference."""
    case = CASES[name]

    def metric(x):
        p = {k: num(v) for k, v in case["params"].items()}  # at the current precision
        return case["metric"](x, p)

    return metric


def points(name):
    rng = random.Random(f"{SEED}/{name}")
    return [[mpf(rng.uniform(lo, hi)) for lo, hi in CASES[name]["boxes"]] for _ in range(POINTS)]


def concrete(d, name, expr):
    """stepper's expression with the case's parameter values and free functions put in."""
    case = CASES[name]
    coords = d.metric.coordinates
    by_name = {str(s): s for s in d.metric.parameters}
    expr = sympy.sympify(expr)
    expr = expr.subs({by_name[k]: sympy.Rational(v.numerator, v.denominator)
                      for k, v in case["params"].items()})
    for f in d.metric.functions:
        expr = expr.subs(f, case["functions"][f.func.__name__](*coords))
    expr = expr.doit()
    assert expr.free_symbols <= set(coords), (name, expr.free_symbols)
    return expr


def index_key(d, key: str) -> tuple:
    """'r,t,t' -> (1, 0, 0) in the coordinate order of the metric file."""
    pos = {str(s): i for i, s in enumerate(d.metric.coordinates)}
    return tuple(pos[part] for part in key.split(","))


def symbolic_evaluator(d, name, results=None):
    """A function point -> {quantity: values keyed like the reference's}.

    All of stepper's expressions for one metric are lambdified together, once.
    Components stepper does not list are absent here and count as zero in
    ``nc.compare``.
    """
    results = d.results if results is None else results
    labels, exprs = [], []
    for qty in ("inverse_metric", "christoffel", "riemann", "ricci", "einstein"):
        for key, e in results[qty].items():
            labels.append((qty, index_key(d, key)))
            exprs.append(concrete(d, name, e))
    for qty in ("scalar", "kretschmann"):
        labels.append((qty, ()))
        exprs.append(concrete(d, name, results[qty]))
    fn = sympy.lambdify(list(d.metric.coordinates), exprs, modules="mpmath", cse=True)

    def evaluate(point):
        with mpmath.workdps(EVAL_DPS):
            values = fn(*point)
            out = {q: {} for q in ("inverse_metric", "christoffel", "riemann", "ricci",
                                   "einstein", "scalar", "kretschmann")}
            for (qty, idx), v in zip(labels, values):
                out[qty][idx] = mpmath.mpmathify(v)
        return out

    return evaluate


def reference_values(name, point):
    """Independent numeric computation (stepper/numeric.py) at ``point``."""
    cv = nc.curvature(hand_metric(name), point, dps=REF_DPS)
    n = cv.dim
    with mpmath.workdps(2 * REF_DPS):
        # G_ij = R_ij - R g_ij / 2, formed here from the reference's numbers
        einstein = {(i, j): cv.ricci[i, j] - cv.scalar * cv.metric[i, j] / 2
                    for i in range(n) for j in range(n)}
    return {
        "inverse_metric": cv.inverse,
        "christoffel": cv.christoffel,
        "riemann": cv.riemann,
        "ricci": cv.ricci,
        "einstein": einstein,
        "scalar": cv.scalar,
        "kretschmann": cv.kretschmann,
    }


def deviations(symbolic: dict, reference: dict) -> dict:
    return {q: nc.compare(symbolic[q], reference[q], floor=FLOOR) for q in reference}


# ----------------------------------------------------------------------------
# Tests
# ----------------------------------------------------------------------------

def test_every_example_is_checked():
    assert {p.stem for p in EXAMPLES.glob("*.toml")} == set(CASES)


@pytest.mark.parametrize("name", sorted(CASES))
def test_symbolic_agrees_with_independent_numeric(name):
    d = derivation(name)
    assert [str(s) for s in d.metric.coordinates] == _coordinate_names(name)
    evaluate = symbolic_evaluator(d, name)
    for point in points(name):
        # independent numeric computation (stepper/numeric.py)
        ref = reference_values(name, point)
        sym = evaluate(point)
        dev = deviations(sym, ref)
        bad = {q: mpmath.nstr(v, 3) for q, v in dev.items() if not v < TOL}
        assert not bad, f"{name} at {[mpmath.nstr(c, 8) for c in point]}: {bad}"


def _coordinate_names(name):
    """Coordinate order the hand-written metric assumes (must match the file)."""
    return {
        "round_sphere": ["theta", "phi"],
        "hyperbolic_plane": ["x", "y"],
        "compact_star_exterior": ["t", "r", "theta", "phi"],
        "expanding_dust_universe": ["t", "x", "y", "z"],
        "spinning_black_hole": ["t", "r", "theta", "phi"],
        "five_dimensional_black_hole": ["t", "r", "chi", "theta", "phi"],
        "twisted_vacuum": ["t", "r", "theta", "phi"],
        "inflating_universe": ["t", "x", "y", "z"],
        "closed_static_universe": ["t", "chi", "theta", "phi"],
        "wormhole_passage": ["t", "r", "theta", "phi"],
        "exterior_from_ansatz": ["t", "r", "theta", "phi"],
        "anisotropic_ball": ["t", "r", "theta", "phi"],
        "wave_train_platform": ["u", "v", "x", "y"],
        "radiating_star_burst": ["u", "r", "theta", "phi"],
        "fluid_star_interior": ["t", "r", "theta", "phi"],
        "curved_fluid_universe": ["t", "r", "theta", "phi"],
    }[name]


@pytest.mark.parametrize("corrupt", [
    pytest.param(lambda e: e * (1 + sympy.Rational(1, 10)), id="times-1.1"),
    pytest.param(lambda e: -e, id="sign-flip"),
])
def test_comparison_detects_a_corrupted_component(corrupt):
    """The check is not vacuous: one wrong Christoffel component is reported."""
    name = "compact_star_exterior"
    d = derivation(name)
    point = points(name)[0]
    # independent numeric computation (stepper/numeric.py)
    ref = reference_values(name, point)

    honest = deviations(symbolic_evaluator(d, name)(point), ref)
    assert honest["christoffel"] < TOL

    results = dict(d.results)
    results["christoffel"] = dict(d.results["christoffel"])
    results["christoffel"]["r,t,t"] = corrupt(results["christoffel"]["r,t,t"])
    assert results["christoffel"] is not d.results["christoffel"]
    bad = deviations(symbolic_evaluator(d, name, results)(point), ref)
    assert bad["christoffel"] > mpf("1e-3")  # ~0.09 resp. 2, versus TOL = 1e-25
    # only the corrupted quantity changes
    for q in ("riemann", "ricci", "scalar", "kretschmann"):
        assert bad[q] == honest[q]


def test_numeric_verification_step_is_recorded_and_catches_a_wrong_symbolic_result():
    # The recorded numeric check of every derivation (stepper/verify.py) against a result corrupted on purpose.
    # Source: independent numeric computation (stepper/numeric.py).
    from stepper.verify import numeric_check

    d = derive(load_metric(EXAMPLES / "compact_star_exterior.toml"))
    step = d.step("numeric_verification")
    assert step.result.holds is True and d.results["numeric_verification"]["passed"] is True
    assert len(d.results["numeric_verification"]["points"]) == 3
    m = d.metric
    corrupted = dict(d.results)
    corrupted["riemann"] = dict(d.results["riemann"])
    corrupted["riemann"]["t,r,t,r"] = d.results["riemann"]["t,r,t,r"] * sympy.Rational(11, 10)
    check = numeric_check(m.coordinates, m.matrix, m.parameters, m.functions, corrupted)
    assert check.passed is False
    assert float(check.deviations["riemann"]) > 1e-3
    assert float(check.deviations["christoffel"]) < 1e-20
