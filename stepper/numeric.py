"""Independent numeric curvature: the second route that checks every derivation.

This module shares no code with the symbolic route: it imports nothing from
the rest of stepper and does no symbolic algebra.  It takes a metric as a plain
Python callable and evaluates curvature at one point by finite differences in
high-precision floating point (mpmath), so that stepper's symbolic results can
be checked against numbers obtained by an entirely different route.

Metric input
------------
``metric(x)`` receives a list of ``n`` mpf coordinates and returns the ``n x n``
matrix of components ``g_{ij}(x)`` (an ``mpmath.matrix`` or a nested list).
It must compute with mpmath functions (``mpmath.sin``, ``mpmath.sqrt``, ...)
at the *current* mpmath precision; Python ``math`` functions or float-valued
intermediate results would limit the accuracy to about 16 digits.  Parameters
captured by the callable (masses, radii, ...) may be mpf, int or float values;
they are used exactly as given.  A matrix that is not symmetric to within
rounding is rejected; the tiny rounding asymmetry is removed by averaging.

Conventions (the same throughout)
---------------------------------
Indices run over ``0 .. n-1`` in the order of the coordinates in ``x``;
``d_c`` is the partial derivative with respect to coordinate ``c``; repeated
indices are summed.

* Christoffel symbols of the second kind::

      Gamma^a_{bc} = 1/2 g^{ad} (d_b g_{dc} + d_c g_{db} - d_d g_{bc})

* Riemann tensor::

      R^a_{bcd} = d_c Gamma^a_{db} - d_d Gamma^a_{cb}
                  + Gamma^a_{ce} Gamma^e_{db} - Gamma^a_{de} Gamma^e_{cb}

  With this convention the round sphere has positive scalar curvature.
* Ricci tensor, contraction of the first and third index: ``R_{bd} = R^a_{bad}``.
* Ricci scalar: ``R = g^{bd} R_{bd}``.
* Kretschmann scalar: ``K = R_{abcd} R^{abcd}`` with ``R_{abcd} = g_{ae} R^e_{bcd}``.

Method
------
Only the metric itself is differentiated numerically.  First and second
partial derivatives of every component come from central differences::

      d_k g      ~ (g(x + h_k e_k) - g(x - h_k e_k)) / (2 h_k)
      d_k d_k g  ~ (g(x + h_k e_k) - 2 g(x) + g(x - h_k e_k)) / h_k^2
      d_k d_l g  ~ (g(++) - g(+-) - g(-+) + g(--)) / (4 h_k h_l)      (k != l)

(``2 n^2 + 1`` metric evaluations in all).  Everything else is exact algebra
on these numbers::

      Gamma_{dbc}     = 1/2 (d_b g_{dc} + d_c g_{db} - d_d g_{bc})
      d_e Gamma_{dbc} = 1/2 (d_e d_b g_{dc} + d_e d_c g_{db} - d_e d_d g_{bc})
      d_e g^{ad}      = - g^{ap} (d_e g_{pq}) g^{qd}
      d_e Gamma^a_{bc} = g^{ad} (d_e Gamma_{dbc} - d_e g_{dp} Gamma^p_{bc})

and the Riemann tensor is assembled from ``Gamma`` and ``d Gamma`` with the
formula above; no numeric derivative of a numeric derivative is taken.

Precision
---------
Every public function takes ``dps`` (default 40), the number of significant
decimal digits wanted.  Internally the work is done at ``2*dps + 30`` digits
with steps ``h_k = 10^-(dps//2 + 10) * max(1, |x_k|)``.  The truncation error
of the differences is then ~ ``h^2 = 10^-(dps+20)`` and the rounding error
~ ``10^-(work) / h^2 = 10^-(dps+10)`` (times the size of the derivatives), so
for a smooth metric at an ordinary point (not near a coordinate singularity,
derivatives of moderate size relative to the coordinate scale) the results
carry about ``dps`` correct digits *relative to the size of the individual
terms*.  Entries that vanish exactly come out as noise of order
``10^-(dps+5)`` times that size, not as exact zeros.  Results are rounded to
``dps`` digits on return.
"""

from __future__ import annotations

from dataclasses import dataclass

import mpmath
from mpmath import mpf

__all__ = [
    "Curvature",
    "christoffel",
    "compare",
    "curvature",
    "kretschmann",
    "metric_jet",
    "ricci",
    "riemann",
    "scalar",
]

DEFAULT_DPS = 40


def _work_dps(dps: int) -> int:
    return 2 * dps + 30


def _step_exponent(dps: int) -> int:
    return dps // 2 + 10


def _check_dps(dps: int) -> int:
    if not isinstance(dps, int) or dps < 5:
        raise ValueError(f"dps must be an integer >= 5, got {dps!r}")
    return dps


def _evaluate(metric, x: list, n: int) -> list:
    """Call ``metric`` at ``x`` and return its components as a symmetric list of lists."""
    m = metric(list(x))
    if not isinstance(m, mpmath.matrix):
        m = mpmath.matrix(m)
    if m.rows != n or m.cols != n:
        raise ValueError(
            f"metric returned a {m.rows}x{m.cols} matrix at a point with {n} coordinates"
        )
    g = [[mpmath.mpmathify(m[i, j]) for j in range(n)] for i in range(n)]
    scale = max(abs(v) for row in g for v in row)
    tol = scale * mpf(10) ** (-(mpmath.mp.dps - 10))
    for i in range(n):
        for j in range(i + 1, n):
            if abs(g[i][j] - g[j][i]) > tol:
                raise ValueError(
                    f"metric is not symmetric: g[{i},{j}] = {g[i][j]} but g[{j},{i}] = {g[j][i]}"
                )
            avg = (g[i][j] + g[j][i]) / 2
            g[i][j] = g[j][i] = avg
    return g


def _invert(g: list, n: int) -> list:
    """g^{-1}, computed as S (S g S)^{-1} S with S = diag(1/sqrt(max_j |g_ij|)), so that components of
    very different sizes (10^300 beside 1) do not make mpmath's relative singularity test fail."""
    scales = []
    for i in range(n):
        largest = max(abs(v) for v in g[i])
        if largest == 0:
            raise ValueError("metric is singular at this point")
        scales.append(1 / mpmath.sqrt(largest))
    m = mpmath.matrix([[scales[i] * g[i][j] * scales[j] for j in range(n)] for i in range(n)])
    if mpmath.det(m) == 0:
        raise ValueError("metric is singular at this point")
    inv = mpmath.inverse(m)
    return [[scales[i] * inv[i, j] * scales[j] for j in range(n)] for i in range(n)]


def _jet(metric, point, dps: int, dependencies=None):
    """g, g^{-1}, dg[k][i][j] = d_k g_ij and ddg[k][l][i][j] = d_k d_l g_ij at the working precision.

    ``dependencies``, when given, holds for each metric component the set of coordinate indices it depends on:
    a derivative along coordinates that no component depends on together is exactly zero and is not
    evaluated.  Must be called inside ``mpmath.workdps(_work_dps(dps))``.
    """
    x = [+mpmath.mpmathify(c) for c in point]  # strings are read at the working precision
    n = len(x)
    if n < 1:
        raise ValueError("point has no coordinates")
    if dependencies is None:
        dependencies = [frozenset(range(n))]
    active = sorted(set().union(*dependencies))
    together = {(k, l) for used in dependencies for k in used for l in used if k < l}
    expo = _step_exponent(dps)
    base = mpf(10) ** (-expo)
    plus, minus, h = [], [], []
    for k in range(n):
        hk = base * max(mpf(1), abs(x[k]))
        p, m = x[k] + hk, x[k] - hk
        plus.append(p)
        minus.append(m)
        h.append((p - m) / 2)  # the step actually taken, after rounding

    def shifted(moves: dict) -> list:
        # moves: {coordinate index: +1 or -1}
        y = list(x)
        for k, sign in moves.items():
            y[k] = plus[k] if sign > 0 else minus[k]
        return y

    zero = [[mpf(0)] * n for _ in range(n)]
    g0 = _evaluate(metric, x, n)
    gp = {k: _evaluate(metric, shifted({k: 1}), n) for k in active}
    gm = {k: _evaluate(metric, shifted({k: -1}), n) for k in active}

    dg = [[[(gp[k][i][j] - gm[k][i][j]) / (2 * h[k]) for j in range(n)] for i in range(n)] if k in gp else zero
          for k in range(n)]
    ddg = [[zero] * n for _ in range(n)]
    for k in active:
        ddg[k][k] = [
            [(gp[k][i][j] - 2 * g0[i][j] + gm[k][i][j]) / (h[k] * h[k]) for j in range(n)]
            for i in range(n)
        ]
    for k, l in sorted(together):
        gpp = _evaluate(metric, shifted({k: 1, l: 1}), n)
        gpm = _evaluate(metric, shifted({k: 1, l: -1}), n)
        gmp = _evaluate(metric, shifted({k: -1, l: 1}), n)
        gmm = _evaluate(metric, shifted({k: -1, l: -1}), n)
        den = 4 * h[k] * h[l]
        block = [
            [(gpp[i][j] - gpm[i][j] - gmp[i][j] + gmm[i][j]) / den for j in range(n)]
            for i in range(n)
        ]
        ddg[k][l] = block
        ddg[l][k] = block
    ginv = _invert(g0, n)
    return n, g0, ginv, dg, ddg


def _nonzero(row) -> list:
    """``[(index, value)]`` of a row's nonzero entries: the contractions below skip the zeros (a structural zero
    of the metric gives exact zeros in its finite differences, so nothing is lost)."""
    return [(i, v) for i, v in enumerate(row) if v]


def _raised(ginv_rows, column) -> mpf:
    """sum_f g^{bf} column(f), over the nonzero g^{bf} of one row."""
    return mpmath.fsum(v * column(f) for f, v in ginv_rows)


def _connection(n, ginv, dg, ddg):
    """Gamma^a_{bc} and dGamma[e][a][b][c] = d_e Gamma^a_{bc} as nested lists."""
    R = range(n)
    ginv_rows = [_nonzero(row) for row in ginv]
    # first kind: G1[d][b][c] = Gamma_{dbc}
    G1 = [[[(dg[b][d][c] + dg[c][d][b] - dg[d][b][c]) / 2 for c in R] for b in R] for d in R]
    G2 = [[[mpmath.fsum(v * G1[d][b][c] for d, v in ginv_rows[a]) for c in R] for b in R] for a in R]
    dG2 = []
    for e in R:
        # d_e Gamma_{dbc} - d_e g_{dp} Gamma^p_{bc}
        inner = [
            [
                [
                    (ddg[e][b][d][c] + ddg[e][c][d][b] - ddg[e][d][b][c]) / 2
                    - mpmath.fsum(v * G2[p][b][c] for p, v in _nonzero(dg[e][d]))
                    for c in R
                ]
                for b in R
            ]
            for d in R
        ]
        dG2.append(
            [[[mpmath.fsum(v * inner[d][b][c] for d, v in ginv_rows[a]) for c in R] for b in R] for a in R]
        )
    return G2, dG2


def _riemann_up(n, G2, dG2):
    """Rm[a][b][c][d] = R^a_{bcd} = d_c Gamma^a_{db} - d_d Gamma^a_{cb} + Gamma^a_{ce} Gamma^e_{db}
    - Gamma^a_{de} Gamma^e_{cb}."""
    R = range(n)
    rows = [[_nonzero(G2[a][c]) for c in R] for a in R]  # rows[a][c] = the nonzero Gamma^a_{ce}
    return [
        [
            [
                [
                    dG2[c][a][d][b]
                    - dG2[d][a][c][b]
                    + mpmath.fsum([v * G2[e][d][b] for e, v in rows[a][c]]
                                  + [-v * G2[e][c][b] for e, v in rows[a][d]])
                    for d in R
                ]
                for c in R
            ]
            for b in R
        ]
        for a in R
    ]


@dataclass(frozen=True)
class Curvature:
    """All curvature quantities at one point (rounded to ``dps`` digits).

    ``christoffel[(a, b, c)] = Gamma^a_{bc}``, ``riemann[(a, b, c, d)] = R^a_{bcd}``,
    ``ricci[b, d] = R_{bd}`` (an ``mpmath.matrix``), ``scalar = R``,
    ``kretschmann = R_{abcd} R^{abcd}``; ``metric`` and ``inverse`` are ``g_{ij}``
    and ``g^{ij}`` at the point.
    """

    dim: int
    dps: int
    metric: mpmath.matrix
    inverse: mpmath.matrix
    christoffel: dict
    riemann: dict
    ricci: mpmath.matrix
    scalar: mpf
    kretschmann: mpf


def _compute(metric, point, dps: int, want_kretschmann: bool = True, dependencies=None) -> Curvature:
    dps = _check_dps(dps)
    with mpmath.workdps(_work_dps(dps)):
        n, g, ginv, dg, ddg = _jet(metric, point, dps, dependencies)
        G2, dG2 = _connection(n, ginv, dg, ddg)
        Rm = _riemann_up(n, G2, dG2)
        R = range(n)
        Ric = [[mpmath.fsum(Rm[a][b][a][d] for a in R) for d in R] for b in R]
        Rs = mpmath.fsum(ginv[b][d] * Ric[b][d] for b in R for d in R)
        K = mpf(0)
        if want_kretschmann:
            # raise b, c, d one at a time: T[a][b][c][d] = R^{a b c d}; lower a: L[a][b][c][d] = R_{abcd}
            rows = [_nonzero(row) for row in ginv]
            T = Rm
            T = [[[[_raised(rows[b], lambda f: T[a][f][c][d]) for d in R] for c in R] for b in R] for a in R]
            T = [[[[_raised(rows[c], lambda f: T[a][b][f][d]) for d in R] for c in R] for b in R] for a in R]
            T = [[[[_raised(rows[d], lambda f: T[a][b][c][f]) for d in R] for c in R] for b in R] for a in R]
            lower = [_nonzero(row) for row in g]
            L = [[[[_raised(lower[a], lambda e: Rm[e][b][c][d]) for d in R] for c in R] for b in R] for a in R]
            K = mpmath.fsum(L[a][b][c][d] * T[a][b][c][d]
                            for a in R for b in R for c in R for d in R if L[a][b][c][d])
    with mpmath.workdps(dps):
        rnd = lambda v: +v  # noqa: E731  (rounds to the current precision)
        return Curvature(
            dim=n,
            dps=dps,
            metric=mpmath.matrix([[rnd(v) for v in row] for row in g]),
            inverse=mpmath.matrix([[rnd(v) for v in row] for row in ginv]),
            christoffel={(a, b, c): rnd(G2[a][b][c]) for a in R for b in R for c in R},
            riemann={
                (a, b, c, d): rnd(Rm[a][b][c][d]) for a in R for b in R for c in R for d in R
            },
            ricci=mpmath.matrix([[rnd(v) for v in row] for row in Ric]),
            scalar=rnd(Rs),
            kretschmann=rnd(K),
        )


def curvature(metric, point, *, dps: int = DEFAULT_DPS, with_kretschmann: bool = True,
              dependencies=None) -> Curvature:
    """Everything at once (one set of metric evaluations); see :class:`Curvature`.  Without the Kretschmann
    scalar (``with_kretschmann=False``) its field is 0.  ``dependencies``: for each metric component, the
    indices of the coordinates it depends on (derivatives along the others are not evaluated: they are 0)."""
    return _compute(metric, point, dps, want_kretschmann=with_kretschmann, dependencies=dependencies)


def metric_jet(metric, point, *, dps: int = DEFAULT_DPS):
    """The numeric derivatives themselves, rounded to ``dps`` digits.

    Returns ``(g, dg, ddg)`` with ``g[(i, j)] = g_ij``, ``dg[(k, i, j)] = d_k g_ij``
    and ``ddg[(k, l, i, j)] = d_k d_l g_ij``.
    """
    dps = _check_dps(dps)
    with mpmath.workdps(_work_dps(dps)):
        n, g, _ginv, dg, ddg = _jet(metric, point, dps)
    R = range(n)
    with mpmath.workdps(dps):
        return (
            {(i, j): +g[i][j] for i in R for j in R},
            {(k, i, j): +dg[k][i][j] for k in R for i in R for j in R},
            {(k, l, i, j): +ddg[k][l][i][j] for k in R for l in R for i in R for j in R},
        )


def christoffel(metric, point, *, dps: int = DEFAULT_DPS) -> dict:
    """``{(a, b, c): Gamma^a_{bc}}`` for all ``n^3`` index triples.

    ``Gamma^a_{bc} = 1/2 g^{ad} (d_b g_{dc} + d_c g_{db} - d_d g_{bc})``.
    """
    dps = _check_dps(dps)
    with mpmath.workdps(_work_dps(dps)):
        n, _g, ginv, dg, ddg = _jet(metric, point, dps)
        R = range(n)
        G1 = [[[(dg[b][d][c] + dg[c][d][b] - dg[d][b][c]) / 2 for c in R] for b in R] for d in R]
        G2 = {
            (a, b, c): mpmath.fsum(ginv[a][d] * G1[d][b][c] for d in R)
            for a in R for b in R for c in R
        }
    with mpmath.workdps(dps):
        return {k: +v for k, v in G2.items()}


def riemann(metric, point, *, dps: int = DEFAULT_DPS) -> dict:
    """``{(a, b, c, d): R^a_{bcd}}`` for all ``n^4`` index quadruples.

    ``R^a_{bcd} = d_c Gamma^a_{db} - d_d Gamma^a_{cb} + Gamma^a_{ce} Gamma^e_{db}
    - Gamma^a_{de} Gamma^e_{cb}``; ``d Gamma`` is formed from first and second
    metric derivatives (see the module docstring), not by differentiating
    numeric Christoffel symbols.
    """
    return _compute(metric, point, dps, want_kretschmann=False).riemann


def ricci(metric, point, *, dps: int = DEFAULT_DPS) -> mpmath.matrix:
    """``R_{bd} = R^a_{bad}`` (first and third index of Riemann contracted), as an ``n x n`` matrix."""
    return _compute(metric, point, dps, want_kretschmann=False).ricci


def scalar(metric, point, *, dps: int = DEFAULT_DPS) -> mpf:
    """Ricci scalar ``R = g^{bd} R_{bd}``."""
    return _compute(metric, point, dps, want_kretschmann=False).scalar


def kretschmann(metric, point, *, dps: int = DEFAULT_DPS) -> mpf:
    """Kretschmann scalar ``R_{abcd} R^{abcd}`` with ``R_{abcd} = g_{ae} R^e_{bcd}``."""
    return _compute(metric, point, dps).kretschmann


def _as_dict(values) -> dict:
    if isinstance(values, dict):
        return values
    if isinstance(values, mpmath.matrix):
        return {(i, j): values[i, j] for i in range(values.rows) for j in range(values.cols)}
    return {(): values}


def compare(symbolic, numeric, *, floor=mpf("1e-20")) -> mpf:
    """Largest relative deviation between two sets of values keyed alike.

    ``symbolic`` and ``numeric`` are dicts ``{index tuple: number}`` (an
    ``mpmath.matrix`` is read as ``{(i, j): m[i, j]}``, a bare number as
    ``{(): x}``).  Values may be anything ``mpmath.mpmathify`` accepts.  A key
    present on one side only counts as 0 on the other side.  Returns::

        max over keys k of  |s_k - n_k| / max(|s_k|, |n_k|, F)
        F = floor * max(1, max over all keys of max(|s_k|, |n_k|))

    i.e. an ordinary relative deviation for entries of normal size, and for
    entries near zero (where the numeric side is only rounding noise) the
    absolute difference measured against the floor ``F``, which is ``floor``
    times the size of the largest entry (but never below ``floor`` itself, so
    that a tensor that vanishes entirely, e.g. Ricci of a vacuum metric, is
    judged by its absolute noise).  The default ``floor = 1e-20`` suits the
    default 40-digit numeric results for quantities of order one; raise it for
    lower ``dps`` or for quantities whose natural size is much smaller than 1.
    Returns 0 for two empty inputs.  Exact symbolic numbers (integers,
    rationals, floats) are converted at 80 or more digits; symbolic
    expressions such as a square root must be evaluated to a number first.
    """
    s_d, n_d = _as_dict(symbolic), _as_dict(numeric)
    # a key that is 0 on both sides deviates by 0 (most of a sparse tensor's n^4 entries)
    keys = [k for k in set(s_d) | set(n_d) if s_d.get(k, 0) or n_d.get(k, 0)]
    if not keys:
        return mpf(0)
    with mpmath.workdps(max(mpmath.mp.dps, 80)):
        s = {k: mpmath.mpmathify(s_d.get(k, 0)) for k in keys}
        nv = {k: mpmath.mpmathify(n_d.get(k, 0)) for k in keys}
        biggest = max(max(abs(s[k]), abs(nv[k])) for k in keys)
        F = mpmath.mpmathify(floor) * max(mpf(1), biggest)
        worst = mpf(0)
        for k in keys:
            den = max(abs(s[k]), abs(nv[k]), F)
            if den == 0:
                continue
            worst = max(worst, abs(s[k] - nv[k]) / den)
    return worst
