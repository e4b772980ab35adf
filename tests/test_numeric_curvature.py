"""Validation of the numeric curvature reference (stepper/numeric.py) itself.

Every expected value below is a closed form taken from outside the project;
its source is written beside the check.  'from memory' means the formula was
recalled, not copied from the cited text; 'common practice' marks standard
facts of the trade.  The metrics are written out by hand as mpmath callables.

Closed forms are evaluated at 100 digits; the reference works at its default
40 digits, and agreement is demanded to TOL = 1e-30 relative to the natural
size of each quantity (the reference promises ~dps digits; this leaves margin).
"""

import random

import mpmath
import pytest
from mpmath import mpf

from stepper import numeric as nc

TOL = mpf("1e-30")
HI = 100  # digits for evaluating closed forms


def close(got, want, scale=None, tol=TOL):
    """|got - want| <= tol * max(|want|, scale) -- relative, with an absolute floor."""
    with mpmath.workdps(HI):
        got, want = mpmath.mpmathify(got), mpmath.mpmathify(want)
        ref = abs(want) if scale is None else max(abs(want), abs(mpmath.mpmathify(scale)))
        return abs(got - want) <= tol * ref


def check_christoffel(gam, expected, n, scale):
    """All n^3 entries: those in ``expected`` (and their b<->c mirror) match, the rest vanish."""
    full = {}
    for (a, b, c), v in expected.items():
        full[(a, b, c)] = v
        full[(a, c, b)] = v
    assert len(gam) == n ** 3
    for key, got in gam.items():
        want = full.get(key, 0)
        assert close(got, want, scale), (key, got, want)


def rand_points(seed, boxes, count):
    rng = random.Random(seed)
    return [[mpf(rng.uniform(lo, hi)) for lo, hi in boxes] for _ in range(count)]


# ---------------------------------------------------------------- 2-sphere


def sphere2(a):
    def g(x):
        th, _ph = x
        return mpmath.diag([a ** 2, (a * mpmath.sin(th)) ** 2])

    return g


@pytest.mark.parametrize("a", [mpf(1), mpf("2.5"), mpf("0.3")])
def test_two_sphere(a):
    # Carroll, Spacetime and Geometry, sec. 3.2 (Christoffels of the sphere) and
    # sec. 3.6 (its Riemann tensor and curvature); from memory.
    for th, ph in rand_points(1, [(0.2, 2.9), (-3.0, 3.0)], 4):
        c = nc.curvature(sphere2(a), [th, ph])
        with mpmath.workdps(HI):
            s, co = mpmath.sin(th), mpmath.cos(th)
            # Gamma^theta_{phi phi} = -sin cos, Gamma^phi_{theta phi} = cot theta
            check_christoffel(c.christoffel, {(0, 1, 1): -s * co, (1, 0, 1): co / s}, 2, 1 / s)
            # R^theta_{phi theta phi} = sin^2 theta (Carroll sec. 3.6, from memory)
            assert close(c.riemann[(0, 1, 0, 1)], s ** 2, 1)
            assert close(c.riemann[(0, 1, 1, 0)], -s ** 2, 1)
            # Gaussian curvature K = R_{theta phi theta phi} / det g = 1/a^2
            r_lower = a ** 2 * c.riemann[(0, 1, 0, 1)]
            assert close(r_lower / (a ** 4 * s ** 2), 1 / a ** 2)
            # Ricci = g / a^2 on a 2-sphere of radius a; scalar 2/a^2
            assert close(c.ricci[0, 0], 1, 1)
            assert close(c.ricci[1, 1], s ** 2, 1)
            assert close(c.ricci[0, 1], 0, 1)
            assert close(c.scalar, 2 / a ** 2)
            # Kretschmann of a 2-space of constant curvature K: 4 K^2 (common practice)
            assert close(c.kretschmann, 4 / a ** 4)


# ------------------------------------------------------------ Schwarzschild


def schwarzschild(M):
    def g(x):
        _t, r, th, _ph = x
        f = 1 - 2 * M / r
        return mpmath.diag([-f, 1 / f, r ** 2, (r * mpmath.sin(th)) ** 2])

    return g


@pytest.mark.parametrize("M", [mpf(1), mpf("0.37")])
def test_schwarzschild(M):
    # Carroll, Spacetime and Geometry, sec. 5.1 (Christoffels and Riemann
    # components of Schwarzschild, G = c = 1); from memory.
    for t, rho, th, ph in rand_points(2, [(-5, 5), (2.3, 12.0), (0.2, 2.9), (0, 6.2)], 4):
        r = rho * M  # r/M between 2.3 and 12, outside the horizon
        c = nc.curvature(schwarzschild(M), [t, r, th, ph])
        with mpmath.workdps(HI):
            s, co = mpmath.sin(th), mpmath.cos(th)
            exp = {
                (1, 0, 0): M * (r - 2 * M) / r ** 3,  # Gamma^r_{tt}
                (0, 0, 1): M / (r * (r - 2 * M)),  # Gamma^t_{tr}
                (1, 1, 1): -M / (r * (r - 2 * M)),  # Gamma^r_{rr}
                (1, 2, 2): -(r - 2 * M),  # Gamma^r_{theta theta}
                (1, 3, 3): -(r - 2 * M) * s ** 2,  # Gamma^r_{phi phi}
                (2, 1, 2): 1 / r,  # Gamma^theta_{r theta}
                (3, 1, 3): 1 / r,  # Gamma^phi_{r phi}
                (2, 3, 3): -s * co,  # Gamma^theta_{phi phi}
                (3, 2, 3): co / s,  # Gamma^phi_{theta phi}
            }
            check_christoffel(c.christoffel, exp, 4, r)
            curv = M / r ** 3  # natural size of curvature components
            # R^t_{rtr} = 2M / (r^2 (r - 2M)), R^theta_{phi theta phi} = 2M sin^2 / r
            assert close(c.riemann[(0, 1, 0, 1)], 2 * M / (r ** 2 * (r - 2 * M)))
            assert close(c.riemann[(2, 3, 2, 3)], 2 * M * s ** 2 / r)
            # vacuum: Ricci = 0, hence R = 0
            for i in range(4):
                for j in range(4):
                    assert close(c.ricci[i, j], 0, curv * r ** 2)
            assert close(c.scalar, 0, curv)
            # Kretschmann 48 M^2 / r^6 (from memory; widely quoted)
            assert close(c.kretschmann, 48 * M ** 2 / r ** 6)


def test_schwarzschild_eddington_finkelstein():
    # Ingoing Eddington-Finkelstein coordinates (v, r, theta, phi):
    # ds^2 = -(1-2M/r) dv^2 + 2 dv dr + r^2 dOmega^2 (Carroll sec. 5.6, from memory).
    # A non-diagonal metric; Ricci = 0 and K = 48 M^2/r^6 are coordinate
    # independent (common practice).
    M = mpf("1.3")

    def g(x):
        _v, r, th, _ph = x
        f = 1 - 2 * M / r
        m = mpmath.diag([-f, 0, r ** 2, (r * mpmath.sin(th)) ** 2])
        m[0, 1] = m[1, 0] = 1
        return m

    # EF coordinates are regular across the horizon: include points inside it
    for v, rho, th, ph in rand_points(3, [(-5, 5), (0.6, 9.0), (0.3, 2.8), (0, 6.2)], 4):
        r = rho * M
        c = nc.curvature(g, [v, r, th, ph])
        with mpmath.workdps(HI):
            for i in range(4):
                for j in range(4):
                    assert close(c.ricci[i, j], 0, M / r)
            assert close(c.kretschmann, 48 * M ** 2 / r ** 6)


# ------------------------------------------------------ flat FRW universe


def flat_frw(a, da, dda):
    def g(x):
        t = x[0]
        s = a(t) ** 2
        return mpmath.diag([-1, s, s, s])

    return g


FRW_CASES = {
    # a = t^(2/3): matter-dominated expansion
    "matter": (
        lambda t: t ** (mpf(2) / 3),
        lambda t: mpf(2) / 3 * t ** (-mpf(1) / 3),
        lambda t: -mpf(2) / 9 * t ** (-mpf(4) / 3),
        (0.3, 4.0),
    ),
    "cosh": (mpmath.cosh, mpmath.sinh, mpmath.cosh, (-2.0, 2.0)),
}


@pytest.mark.parametrize("case", sorted(FRW_CASES))
def test_flat_frw(case):
    # Carroll, Spacetime and Geometry, sec. 8.3 (flat case k = 0); from memory:
    # R_tt = -3 a''/a, R_ij = (a a'' + 2 a'^2) delta_ij, R = 6 (a''/a + (a'/a)^2).
    a, da, dda, trange = FRW_CASES[case]
    for t, x, y, z in rand_points(4, [trange, (-3, 3), (-3, 3), (-3, 3)], 4):
        c = nc.curvature(flat_frw(a, da, dda), [t, x, y, z])
        with mpmath.workdps(HI):
            A, dA, ddA = a(t), da(t), dda(t)
            size = abs(ddA / A) + (dA / A) ** 2
            assert close(c.scalar, 6 * (ddA / A + (dA / A) ** 2), size)
            assert close(c.ricci[0, 0], -3 * ddA / A, size)
            for i in range(1, 4):
                assert close(c.ricci[i, i], A * ddA + 2 * dA ** 2, size * A ** 2)
                assert close(c.ricci[0, i], 0, size * A)
                for j in range(i + 1, 4):
                    assert close(c.ricci[i, j], 0, size * A ** 2)


# ---------------------------------------------------------------------- Kerr


def kerr(M, a):
    # Boyer-Lindquist coordinates (t, r, theta, phi) (Carroll sec. 6.6, from memory):
    # Sigma = r^2 + a^2 cos^2, Delta = r^2 - 2 M r + a^2,
    # g_tt = -(1 - 2Mr/Sigma), g_tphi = -2 M a r sin^2 / Sigma, g_rr = Sigma/Delta,
    # g_thth = Sigma, g_phph = ((r^2+a^2)^2 - a^2 Delta sin^2) sin^2 / Sigma.
    def g(x):
        _t, r, th, _ph = x
        s2 = mpmath.sin(th) ** 2
        sig = r ** 2 + a ** 2 * mpmath.cos(th) ** 2
        dlt = r ** 2 - 2 * M * r + a ** 2
        m = mpmath.diag(
            [
                -(1 - 2 * M * r / sig),
                sig / dlt,
                sig,
                ((r ** 2 + a ** 2) ** 2 - a ** 2 * dlt * s2) * s2 / sig,
            ]
        )
        m[0, 3] = m[3, 0] = -2 * M * a * r * s2 / sig
        return m

    return g


def test_kerr():
    # Ricci = 0 (vacuum) and
    # K = 48 M^2 (r^6 - 15 r^4 a^2 c^2 + 15 r^2 a^4 c^4 - a^6 c^6) / Sigma^6, c = cos theta
    # (from memory; widely quoted).
    rng = random.Random(5)
    for _ in range(6):
        M = mpf(rng.uniform(0.5, 2.0))
        a = M * mpf(rng.uniform(0.05, 0.99))
        r_plus = M + mpmath.sqrt(M ** 2 - a ** 2)
        r = r_plus + M * mpf(rng.uniform(0.2, 8.0))  # includes ergoregion points
        th = mpf(rng.uniform(0.15, 3.0))
        pt = [mpf(rng.uniform(-5, 5)), r, th, mpf(rng.uniform(0, 6.2))]
        c = nc.curvature(kerr(M, a), pt)
        with mpmath.workdps(HI):
            co = mpmath.cos(th)
            sig = r ** 2 + a ** 2 * co ** 2
            size = M / sig ** mpf(1.5)  # natural size of curvature components
            for i in range(4):
                for j in range(4):
                    assert close(c.ricci[i, j], 0, size * r ** 2)
            k = 48 * M ** 2 * (
                r ** 6 - 15 * r ** 4 * a ** 2 * co ** 2 + 15 * r ** 2 * a ** 4 * co ** 4 - a ** 6 * co ** 6
            ) / sig ** 6
            # K changes sign for a != 0, so compare against the size 48 M^2/Sigma^3
            assert close(c.kretschmann, k, 48 * M ** 2 / sig ** 3)


# ------------------------------------------------------- hyperbolic plane


def test_hyperbolic_upper_half_plane():
    # ds^2 = (dx^2 + dy^2) / y^2: Gaussian curvature -1, scalar -2 (common practice).
    def g(x):
        return mpmath.diag([1 / x[1] ** 2, 1 / x[1] ** 2])

    for x, y in rand_points(6, [(-10, 10), (0.05, 20)], 5):
        c = nc.curvature(g, [x, y])
        with mpmath.workdps(HI):
            assert close(c.scalar, -2)
            # Gaussian curvature R_{xyxy} / det g = g_xx R^x_{yxy} / det g
            assert close(c.riemann[(0, 1, 0, 1)] * y ** 2, -1)
            # Gamma^x_{xy} = -1/y, Gamma^y_{xx} = 1/y, Gamma^y_{yy} = -1/y (common practice)
            check_christoffel(c.christoffel, {(0, 0, 1): -1 / y, (1, 0, 0): 1 / y, (1, 1, 1): -1 / y}, 2, 1 / y)


# ----------------------------------------------- maximally symmetric spaces


def assert_maximally_symmetric(c, K, size):
    """R_{abcd} = K (g_ac g_bd - g_ad g_bc); Ricci = (n-1) K g; R = n (n-1) K (common practice)."""
    n = c.dim
    g = c.metric
    with mpmath.workdps(HI):
        for a in range(n):
            for b in range(n):
                for cc in range(n):
                    for d in range(n):
                        lower = mpmath.fsum(g[a, e] * c.riemann[(e, b, cc, d)] for e in range(n))
                        want = K * (g[a, cc] * g[b, d] - g[a, d] * g[b, cc])
                        assert close(lower, want, size), (a, b, cc, d)
        for b in range(n):
            for d in range(n):
                assert close(c.ricci[b, d], (n - 1) * K * g[b, d], size)
        assert close(c.scalar, n * (n - 1) * K)
        # Kretschmann of constant curvature: 2 n (n-1) K^2 (common practice)
        assert close(c.kretschmann, 2 * n * (n - 1) * K ** 2)


def test_three_sphere():
    # ds^2 = a^2 (dchi^2 + sin^2 chi (dtheta^2 + sin^2 theta dphi^2)), K = 1/a^2
    # (common practice).
    for a in (mpf(1), mpf("1.7")):
        def g(x, a=a):
            chi, th, _ph = x
            s = mpmath.sin(chi)
            return mpmath.diag([a ** 2, (a * s) ** 2, (a * s * mpmath.sin(th)) ** 2])

        for pt in rand_points(7, [(0.3, 2.8), (0.3, 2.8), (0, 6.2)], 3):
            c = nc.curvature(g, pt)
            with mpmath.workdps(HI):
                size = max(abs(v) for v in c.metric) ** 2 / a ** 2
                assert_maximally_symmetric(c, 1 / a ** 2, size)


def test_de_sitter_flat_slicing():
    # ds^2 = -dt^2 + exp(2 H t) (dx^2 + dy^2 + dz^2): de Sitter, K = H^2 (common practice).
    for H in (mpf(1), mpf("0.4")):
        def g(x, H=H):
            s = mpmath.exp(2 * H * x[0])
            return mpmath.diag([-1, s, s, s])

        for pt in rand_points(8, [(-1.5, 1.5), (-3, 3), (-3, 3), (-3, 3)], 3):
            c = nc.curvature(g, pt)
            with mpmath.workdps(HI):
                size = max(abs(v) for v in c.metric) ** 2 * H ** 2
                assert_maximally_symmetric(c, H ** 2, size)


def test_de_sitter_static_patch():
    # ds^2 = -(1 - r^2/L^2) dt^2 + dr^2/(1 - r^2/L^2) + r^2 dOmega^2, K = 1/L^2
    # (common practice).
    L = mpf("2.2")

    def g(x):
        _t, r, th, _ph = x
        f = 1 - r ** 2 / L ** 2
        return mpmath.diag([-f, 1 / f, r ** 2, (r * mpmath.sin(th)) ** 2])

    for t, rho, th, ph in rand_points(9, [(-3, 3), (0.1, 0.9), (0.3, 2.8), (0, 6.2)], 3):
        c = nc.curvature(g, [t, rho * L, th, ph])
        with mpmath.workdps(HI):
            size = max(abs(v) for v in c.metric) ** 2 / L ** 2
            assert_maximally_symmetric(c, 1 / L ** 2, size)


# --------------------------------------------- generic checks of the machinery


def flat_in_curvilinear_coordinates(x):
    """Minkowski pulled back by y = F(x), g = J^T eta J, with the Jacobian J written by hand.

    F = (x0 + 0.3 sin x1, x1 + 0.2 x0 x2, x2 + 0.1 x1^2, x3 + 0.25 x0 x1).
    """
    x0, x1, x2, x3 = x
    k = [mpf("0.3"), mpf("0.2"), mpf("0.1"), mpf("0.25")]
    J = mpmath.matrix(
        [
            [1, k[0] * mpmath.cos(x1), 0, 0],
            [k[1] * x2, 1, k[1] * x0, 0],
            [0, 2 * k[2] * x1, 1, 0],
            [k[3] * x1, k[3] * x0, 0, 1],
        ]
    )
    eta = mpmath.diag([-1, 1, 1, 1])
    return J.T * eta * J


def test_flat_metric_in_curvilinear_coordinates_has_no_curvature():
    # A flat metric in any coordinates has R^a_{bcd} = 0 (common practice);
    # this exercises every off-diagonal term of the machinery.
    for pt in rand_points(10, [(-0.5, 0.5)] * 4, 3):
        c = nc.curvature(flat_in_curvilinear_coordinates, pt)
        assert any(abs(v) > mpf("0.01") for v in c.christoffel.values())
        for key, v in c.riemann.items():
            assert close(v, 0, 1), key
        assert close(c.kretschmann, 0, 1)


def generic_metric(x):
    """A smooth, non-diagonal Riemannian 3-metric with no symmetry (positive definite near 0)."""
    x0, x1, x2 = x
    return mpmath.matrix(
        [
            [2 + mpmath.sin(x0 * x1), x2 / 5, mpmath.cos(x0) / 7],
            [x2 / 5, 3 + x0 ** 2 * x2, mpmath.exp(x1) / 9],
            [mpmath.cos(x0) / 7, mpmath.exp(x1) / 9, 1 + x1 ** 2 / 4 + x0 / 10],
        ]
    )


def test_algebraic_symmetries_of_riemann():
    # For the Levi-Civita connection (common practice):
    # R_{abcd} = -R_{bacd} = -R_{abdc} = R_{cdab};  R_{a[bcd]} = 0;  R_{bd} = R_{db};
    # Gamma^a_{bc} = Gamma^a_{cb}.
    for pt in rand_points(11, [(-0.6, 0.6)] * 3, 3):
        c = nc.curvature(generic_metric, pt)
        n = 3
        R = range(n)
        with mpmath.workdps(HI):
            low = {
                (a, b, cc, d): mpmath.fsum(c.metric[a, e] * c.riemann[(e, b, cc, d)] for e in R)
                for a in R for b in R for cc in R for d in R
            }
            size = max(abs(v) for v in low.values())
            assert size > mpf("0.01")  # genuinely curved
            for (a, b, cc, d), v in low.items():
                assert close(v, -low[(b, a, cc, d)], size)
                assert close(v, -low[(a, b, d, cc)], size)
                assert close(v, low[(cc, d, a, b)], size)
                assert close(v + low[(a, cc, d, b)] + low[(a, d, b, cc)], 0, size)
            for b in R:
                for d in R:
                    assert close(c.ricci[b, d], c.ricci[d, b], size)
            for (a, b, cc), v in c.christoffel.items():
                assert close(v, c.christoffel[(a, cc, b)], 1)


def test_individual_functions_agree_with_curvature():
    pt = [mpf("0.2"), mpf("-0.3"), mpf("0.45")]
    c = nc.curvature(generic_metric, pt)
    assert nc.christoffel(generic_metric, pt) == c.christoffel
    assert nc.riemann(generic_metric, pt) == c.riemann
    assert nc.ricci(generic_metric, pt) == c.ricci
    assert nc.scalar(generic_metric, pt) == c.scalar
    assert nc.kretschmann(generic_metric, pt) == c.kretschmann


def test_metric_jet_matches_hand_derivatives():
    # d/dr and d^2/dr^2 of g_tt = -(1 - 2M/r): -2M/r^2 and 4M/r^3 (elementary calculus).
    M, r, th = mpf("1.1"), mpf("5.3"), mpf("0.9")
    g, dg, ddg = nc.metric_jet(schwarzschild(M), [0, r, th, 0])
    with mpmath.workdps(HI):
        assert close(g[(0, 0)], -(1 - 2 * M / r))
        assert close(dg[(1, 0, 0)], -2 * M / r ** 2)
        assert close(ddg[(1, 1, 0, 0)], 4 * M / r ** 3)
        assert close(ddg[(1, 2, 3, 3)], 4 * r * mpmath.sin(th) * mpmath.cos(th))


@pytest.mark.parametrize("dps, tol", [(20, "1e-15"), (40, "1e-35"), (70, "1e-62")])
def test_precision_keyword(dps, tol):
    # Schwarzschild Kretschmann 48 M^2/r^6 (from memory; widely quoted): the error
    # shrinks with the requested number of digits.
    M, r = mpf("0.8"), mpf("4.1")
    k = nc.kretschmann(schwarzschild(M), [0, r, mpf("1.2"), mpf("0.3")], dps=dps)
    with mpmath.workdps(HI):
        assert close(k, 48 * M ** 2 / r ** 6, tol=mpf(tol))
    with pytest.raises(ValueError):
        nc.scalar(schwarzschild(M), [0, r, 1, 0], dps=2)


# ------------------------------------------------------------- compare()


def test_compare():
    assert nc.compare({}, {}) == 0
    assert nc.compare({(0,): mpf(2)}, {(0,): mpf(2)}) == 0
    # ordinary relative deviation
    x = mpf("1.001")
    d = nc.compare({(0,): mpf(1), (1,): mpf(100)}, {(0,): x, (1,): mpf(100)})
    with mpmath.workdps(HI):
        assert abs(d - (x - 1) / x) < mpf("1e-25")
    # an exact zero against numeric noise is judged against the floor (1e-20 x largest entry)
    d = nc.compare({(0,): 0, (1,): mpf(10)}, {(0,): mpf("1e-40"), (1,): mpf(10)})
    assert abs(d / mpf("1e-21") - 1) < mpf("1e-12")
    # a tensor that vanishes entirely: absolute floor 1e-20
    d = nc.compare({(0, 0): 0}, {(0, 0): mpf("3e-45")})
    assert abs(d / mpf("3e-25") - 1) < mpf("1e-12")
    d = nc.compare({(0,): 0}, {(0,): mpf("1e-10")}, floor=mpf("1e-5"))
    assert abs(d / mpf("1e-5") - 1) < mpf("1e-12")
    # a key missing on one side counts as 0
    assert nc.compare({(0,): mpf(1)}, {(0,): mpf(1), (1,): mpf(3)}) == 1
    # matrices and bare numbers are accepted; exact integers/floats are fine
    m = mpmath.matrix([[1, 2], [2, 5]])
    assert nc.compare({(0, 0): 1, (0, 1): 2, (1, 0): 2, (1, 1): 5}, m) == 0
    assert nc.compare(3, mpf(3)) == 0


def test_compare_against_closed_form_dict():
    # typical use: a dict of exact values against the numeric dict
    M, r, th = mpf(1), mpf(6), mpf("1.0")
    gam = nc.christoffel(schwarzschild(M), [0, r, th, 0])
    with mpmath.workdps(HI):
        exact = {k: mpf(0) for k in gam}
        for (a, b, c), v in {
            (1, 0, 0): M * (r - 2 * M) / r ** 3,
            (0, 0, 1): M / (r * (r - 2 * M)),
            (1, 1, 1): -M / (r * (r - 2 * M)),
            (1, 2, 2): -(r - 2 * M),
            (1, 3, 3): -(r - 2 * M) * mpmath.sin(th) ** 2,
            (2, 1, 2): 1 / r,
            (3, 1, 3): 1 / r,
            (2, 3, 3): -mpmath.sin(th) * mpmath.cos(th),
            (3, 2, 3): mpmath.cos(th) / mpmath.sin(th),
        }.items():
            exact[(a, b, c)] = exact[(a, c, b)] = v
    assert nc.compare(exact, gam) < mpf("1e-30")
    exact[(1, 0, 0)] *= 1 + mpf("1e-12")
    assert mpf("0.9e-12") < nc.compare(exact, gam) < mpf("1.1e-12")


# ---------------------------------------------------------------- bad input


def test_bad_input_is_rejected():
    with pytest.raises(ValueError, match="not symmetric"):
        nc.christoffel(lambda x: mpmath.matrix([[1, 0.5], [0, 1]]), [0, 0])
    with pytest.raises(ValueError, match="2x2"):
        nc.christoffel(lambda x: mpmath.eye(2), [0, 0, 0])
    with pytest.raises(ValueError, match="singular"):
        nc.christoffel(lambda x: mpmath.matrix([[1, 1], [1, 1]]), [0, 0])
    # nested lists are accepted as well as mpmath matrices
    gam = nc.christoffel(lambda x: [[1, 0], [0, 1]], [0, 0])
    assert all(v == 0 for v in gam.values())
