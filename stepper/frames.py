"""Frames and null vectors of the user's own, and the metric's obvious null directions.

A metric file's ``[frame]`` (:class:`stepper.record.FrameRequest`) gives an orthonormal frame or a null
tetrad by components.  :func:`given_frame` checks that it is one, exactly, and records two steps:

* ``frame/given`` (kind "frame", component "given"): the vectors with upper indices (covectors given with
  ``index = "down"`` raised with g^ij), and, for an orthonormal frame in four dimensions, the null tetrad
  l = (e0 + e1)/sqrt 2, n = (e0 - e1)/sqrt 2, m = (e2 + i e3)/sqrt 2 built from it;
* ``frame/given/check`` (kind "check", component "given frame"): g(e_a, e_b) = eta_ab, or l.l = n.n = 0,
  l.n = -1, m.m = 0, m.mbar = 1 and l, n orthogonal to m (m = a + i b split into its real and imaginary
  vectors, so that every product is real: m.m = a.a - b.b + 2i a.b, m.mbar = a.a + b.b).

Each vector's components are rational functions of the metric's symbols times one common factor R made of
square roots (e = w R, w in the chain's exact arithmetic, R^2 rational), so every product is decided in
the exact arithmetic: g(e_a, e_b) = g(w_a, w_b) R_a R_b.

:func:`null_directions` lists the null vectors stepper knows: the given l and n, every coordinate vector
d_v with g_vv = 0 and every gradient d_a u of a coordinate with g^uu = 0 (a null hypersurface u = const),
checked null as a recorded step.  :func:`null_dust` tests whether T_ab = f k_a k_b along one of them, the
stress-energy of null dust (pure radiation), for which T_ab l^a l^b = f (k.l)^2 >= 0 for every null l
exactly when f >= 0.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import sympy

from .algebra import UnsupportedByField, printer_stable
from .errors import InputError

FORMULAS = {
    "orthonormal": r"g_{ij}\, e_{(a)}{}^i e_{(b)}{}^j = \eta_{(a)(b)} = \operatorname{diag}(-1, 1, \dots, 1)",
    "null": (r"l \cdot l = n \cdot n = m \cdot m = l \cdot m = n \cdot m = 0,\quad l \cdot n = -1,\quad "
             r"m \cdot \bar m = 1"),
    "raised": r"e^i = g^{ij} e_j",
    "tetrad": (r"l = \tfrac{e_{(0)} + e_{(1)}}{\sqrt 2},\quad n = \tfrac{e_{(0)} - e_{(1)}}{\sqrt 2},\quad "
               r"m = \tfrac{e_{(2)} + i e_{(3)}}{\sqrt 2}"),
    "as_given": r"e = e^i\, \partial_i",
    "null_directions": r"g(\partial_v, \partial_v) = g_{vv} = 0,\qquad g^{ab}\,\partial_a u\, \partial_b u = g^{uu} = 0",
    "null_dust": r"T_{ab} = f\, k_a k_b,\quad k_a k^a = 0 \;\Rightarrow\; T_{ab}\, l^a l^b = f\,(k_a l^a)^2",
}

#: The stage the frame's steps are recorded in (the Weyl scalars may use them before any matter stage runs).
STAGE = "curvature"


@dataclass
class RealVector:
    """One real vector e = w R: ``w`` the upper components in the chain's arithmetic, ``q`` = R^2 in it,
    ``root`` = R (a sympy product of square roots, 1 when the components are rational)."""

    label: str
    w: list
    q: object
    root: sympy.Expr

    def components(self, chain) -> list[sympy.Expr]:
        return [printer_stable(chain.expr(wi) * self.root) for wi in self.w]


@dataclass
class CheckedFrame:
    kind: str
    labels: list[str]                 # "t", "r", ... or "l", "n", "m"
    real: dict[str, RealVector]       # by label; m as "m_re" and "m_im"
    holds: bool | None
    step_id: str
    vectors: dict = field(default_factory=dict)     # label -> [sympy upper components] (m complex)
    tetrad: tuple | None = None                      # (l, n, m, mbar) upper components, or None


def given_frame(chain) -> CheckedFrame | None:
    """The metric file's frame, checked (steps recorded once per chain); None without ``[frame]``."""
    if chain.metric.frame is None:
        return None
    cached = getattr(chain, "_given_frame", None)
    if cached is None:
        cached = _check(chain, chain.metric.frame)
        chain._given_frame = cached
    return cached


def user_null_tetrad(chain):
    """((l, n, m, mbar) as lists of upper components, the id of the step that checked them), or None when
    the metric file gave no null tetrad (nor an orthonormal frame in four dimensions) or it is not one."""
    frame = given_frame(chain)
    if frame is None or frame.tetrad is None or frame.holds is not True:
        return None
    return tuple(list(v) for v in frame.tetrad), frame.step_id


# ---------------------------------------------------------------------------------------------------------
def _element(chain, expr: sympy.Expr, where: str):
    try:
        return chain.A.from_expr(expr)
    except (UnsupportedByField, TypeError, ValueError):
        raise InputError(f"{where}: {expr} is not a rational function of the metric's symbols times one common "
                         "square-root factor per vector") from None


def _root_factor(expr: sympy.Expr) -> sympy.Expr:
    """The product of the square-root factors of a product (1 when there are none)."""
    root = sympy.Integer(1)
    for factor in sympy.Mul.make_args(expr):
        base, exponent = factor.as_base_exp()
        if exponent.is_Rational and not exponent.is_Integer and exponent.q == 2:
            root *= factor
    return root


def _split(chain, label: str, components: list[sympy.Expr], lower: bool) -> RealVector:
    """Write a real vector (or covector, raised here) as w R with w in the chain's arithmetic."""
    lead = next(c for c in components if c != 0)
    root = _root_factor(sympy.factor(lead))
    q = _element(chain, sympy.powsimp(root ** 2), f"frame.vectors.{label}")
    w = [chain.A.zero if c == 0 else _element(chain, sympy.powsimp(sympy.factor(c) / root),
                                               f"frame.vectors.{label}") for c in components]
    if lower:
        n = chain.n
        w = [sum((chain.ginv[i][j] * w[j] for j in range(n) if not chain.is_zero(w[j])), chain.A.zero)
             for i in range(n)]
    return RealVector(label, w, q, root)


def _inner(chain, u: list, v: list):
    g, A = chain.g, chain.A
    total = A.zero
    for i, ui in enumerate(u):
        if chain.is_zero(ui):
            continue
        for j, vj in enumerate(v):
            if chain.is_zero(vj) or chain.is_zero(g[i][j]):
                continue
            total = total + ui * g[i][j] * vj
    return total


def _parts(expr: sympy.Expr) -> tuple[sympy.Expr, sympy.Expr]:
    """(real part, imaginary part) of a + I b with a, b free of I."""
    expanded = sympy.expand(expr)
    imaginary = expanded.coeff(sympy.I)
    real = sympy.expand(expanded - sympy.I * imaginary)
    if real.has(sympy.I) or imaginary.has(sympy.I):
        raise InputError(f"frame.vectors.m: write each complex component as [\"real part\", \"imaginary part\"]")
    return printer_stable(real), printer_stable(imaginary)


def _product(chain, a: RealVector, b: RealVector, target: int):
    """The residue of g(a, b) = target in the exact arithmetic."""
    inner = _inner(chain, a.w, b.w)
    if a is b:
        return inner * a.q - chain.A.constant(target)
    if target == 0:
        return inner
    both = _element(chain, sympy.powsimp(a.root * b.root), f"frame.vectors.{a.label} and {b.label}")
    return inner * both - chain.A.constant(target)


def _check(chain, request) -> CheckedFrame:
    n, names = chain.n, [x.name for x in chain.x]
    lower = request.index == "down"
    stage = STAGE  # the frame is geometry: its steps sit with the curvature, before anything that uses them
    real: dict[str, RealVector] = {}
    labels = []
    for label, components in request.vectors:
        labels.append(label)
        if label == "m":
            parts = [_parts(c) for c in components]
            for suffix, k in (("re", 0), ("im", 1)):
                part = [p[k] for p in parts]
                if any(c != 0 for c in part):
                    real[f"m_{suffix}"] = _split(chain, f"m ({'real' if k == 0 else 'imaginary'} part)", part, lower)
            if "m_re" not in real or "m_im" not in real:
                raise InputError("frame.vectors.m: m must have a non-zero real and a non-zero imaginary part "
                                 "(m.m = 0 and m.mbar = 1)")
        else:
            real[label] = _split(chain, label, list(components), lower)
    vectors: dict[str, list] = {}
    for label in labels:
        if label == "m":
            re, im = real["m_re"].components(chain), real["m_im"].components(chain)
            vectors["m"] = [printer_stable(a + sympy.I * b) for a, b in zip(re, im)]
        else:
            vectors[label] = real[label].components(chain)

    def shown(values: list) -> dict:
        return {names[i]: v for i, v in enumerate(values) if v != 0}

    tetrad = None
    result = {"vectors": {label: shown(vectors[label]) for label in labels}}
    if request.kind == "orthonormal":
        order = labels
        if n == 4:
            e = [vectors[label] for label in order]
            half = 1 / sympy.sqrt(2)
            l_ = [printer_stable((a + b) * half) for a, b in zip(e[0], e[1])]
            n_ = [printer_stable((a - b) * half) for a, b in zip(e[0], e[1])]
            m_ = [printer_stable((a + sympy.I * b) * half) for a, b in zip(e[2], e[3])]
            mbar = [printer_stable((a - sympy.I * b) * half) for a, b in zip(e[2], e[3])]
            tetrad = (l_, n_, m_, mbar)
            result["null_tetrad"] = {"l": shown(l_), "n": shown(n_), "m": shown(m_)}
    elif all(label in vectors for label in ("l", "n", "m")):
        m_ = vectors["m"]
        tetrad = (vectors["l"], vectors["n"], m_, [printer_stable(x.subs(sympy.I, -sympy.I)) for x in m_])
    what = ("an orthonormal frame" if request.kind == "orthonormal" else
            "null vectors" if len(labels) < 3 else "a null tetrad")
    raised = " (covector components raised with g^ij)" if lower else ""
    tetrad_words = ("; the null tetrad l = (e0 + e1)/sqrt 2, n = (e0 - e1)/sqrt 2, m = (e2 + i e3)/sqrt 2 is built "
                    "from it" if "null_tetrad" in result else "")
    chain.record(id="frame/given", kind="frame", component="given", stage=stage,
                 annotation=f"The metric file gives {what}; its vectors with upper indices{raised}{tetrad_words}.",
                 formula=r",\qquad ".join(FORMULAS[k] for k in (("raised",) if lower else ("as_given",))
                                           + (("tetrad",) if "null_tetrad" in result else ())), uses=("metric", "inverse_metric") if lower else ("metric",),
                 result=result,
                 params={"kind": request.kind, "index": request.index, "order": labels,
                         "given": {label: shown(list(c)) for label, c in request.vectors},
                         "tetrad_from_frame": "null_tetrad" in result})
    # the products that make it what it claims to be
    products, residues = [], []
    if request.kind == "orthonormal":
        for a, first in enumerate(labels):
            for second in labels[a:]:
                target = (-1 if a == 0 else 1) if first == second else 0
                products.append({"first": first, "second": second, "value": target})
                residues.append(_product(chain, real[first], real[second], target))
    else:
        for first, second, target in (("l", "l", 0), ("n", "n", 0), ("l", "n", -1)):
            if first in real and second in real:
                products.append({"first": first, "second": second, "value": target})
                residues.append(_product(chain, real[first], real[second], target))
        for label in ("l", "n"):
            if label in real and "m_re" in real:
                products.append({"first": label, "second": "m", "value": 0})
                residues += [_product(chain, real[label], real["m_re"], 0), _product(chain, real[label], real["m_im"], 0)]
        if "m_re" in real:
            a, b = real["m_re"], real["m_im"]
            products += [{"first": "m", "second": "m", "value": 0}, {"first": "m", "second": "mbar", "value": 1}]
            residues += [_inner(chain, a.w, a.w) * a.q - _inner(chain, b.w, b.w) * b.q, _inner(chain, a.w, b.w),
                         _inner(chain, a.w, a.w) * a.q + _inner(chain, b.w, b.w) * b.q - chain.A.one]
    statement = ("The given frame is orthonormal: g(e_a, e_b) = eta_ab." if request.kind == "orthonormal" else
                 "The given vectors are null vectors of a null tetrad: l.l = n.n = 0, l.n = -1, m.m = 0, m.mbar = 1, "
                 "l.m = n.m = 0 (those of the given vectors).")
    verdict, check = chain.identity_verdict(statement, residues, "the products minus their required values")
    chain.record(id="frame/given/check", kind="check", component="given frame", stage=stage,
                 annotation=statement, formula=FORMULAS[request.kind], uses=("frame/given", "metric"),
                 result=verdict, params={"kind": request.kind, "products": products, **check})
    return CheckedFrame(request.kind, labels, real, verdict.holds, "frame/given/check", vectors, tetrad)


# ---------------------------------------------------------------------------------------------------------
@dataclass
class NullDirection:
    name: str            # "l", "d_v" (coordinate vector), "du" (gradient of a coordinate)
    source: str          # "given", "coordinate vector", "coordinate gradient"
    coordinate: str      # the coordinate of d_v or du ("" for a given vector)
    upper: list          # elements of the chain's arithmetic (None when only the root form is known)
    lower: list
    root: sympy.Expr = sympy.Integer(1)   # the vector is (upper) * root


def null_directions(chain, stage: str) -> list[NullDirection]:
    """The null vectors stepper knows for this metric, checked null as a recorded step (once per chain)."""
    cached = getattr(chain, "_null_directions", None)
    if cached is not None:
        return cached
    n, names, A = chain.n, [x.name for x in chain.x], chain.A
    found: list[NullDirection] = []
    frame = given_frame(chain)
    if frame is not None and frame.kind == "null" and frame.holds is not False:
        for label in ("l", "n"):
            if label in frame.real:
                v = frame.real[label]
                lower = [sum((chain.g[i][j] * v.w[j] for j in range(n)), A.zero) for i in range(n)]
                found.append(NullDirection(label, "given", "", v.w, lower, v.root))
    residues = []
    for k in range(n):
        if chain.is_zero(chain.g[k][k]):
            upper = [A.one if i == k else A.zero for i in range(n)]
            found.append(NullDirection(f"d_{names[k]}", "coordinate vector", names[k], upper,
                                       [chain.g[i][k] for i in range(n)]))
            residues.append(chain.g[k][k])
    for k in range(n):
        if chain.is_zero(chain.ginv[k][k]):
            found.append(NullDirection(f"d{names[k]}", "coordinate gradient", names[k],
                                       [chain.ginv[i][k] for i in range(n)],
                                       [A.one if i == k else A.zero for i in range(n)]))
            residues.append(chain.ginv[k][k])
    chain._null_directions = found
    if not any(d.source != "given" for d in found):
        return found
    data = {d.name: {"source": d.source, "coordinate": d.coordinate,
                     "upper": {names[i]: chain.expr(u) for i, u in enumerate(d.upper) if not chain.is_zero(u)},
                     "lower": {names[i]: chain.expr(u) for i, u in enumerate(d.lower) if not chain.is_zero(u)}}
            for d in found if d.source != "given"}
    statement = "Each listed coordinate direction is null: g_vv = 0 for a vector d_v, g^uu = 0 for a gradient du."
    verdict, check = chain.identity_verdict(statement, residues, "the diagonal entries g_vv and g^uu")
    chain.record(id="null_directions", kind="check", component="null directions", stage=stage,
                 annotation=("Null directions read off the metric: each coordinate vector d_v with g_vv = 0 and "
                             "each gradient du of a coordinate u with g^uu = 0 (u = const is a null hypersurface; "
                             "its normal k_a = d_a u, k^a = g^ab d_b u, is null and tangent to it)."),
                 formula=FORMULAS["null_directions"], uses=("metric", "inverse_metric"), result=verdict,
                 params={"directions": data, **check})
    return found


def contraction(chain, table, direction: NullDirection):
    """table(k, k) = table_ij k^i k^j for a symmetric table of elements, in the exact arithmetic."""
    n, A = chain.n, chain.A
    total = A.zero
    for i in range(n):
        if chain.is_zero(direction.upper[i]):
            continue
        for j in range(n):
            if chain.is_zero(direction.upper[j]) or chain.is_zero(table[i][j]):
                continue
            total = total + table[i][j] * direction.upper[i] * direction.upper[j]
    if direction.root != 1:
        total = total * _element(chain, sympy.powsimp(direction.root ** 2), f"frame.vectors.{direction.name}")
    return total


def null_dust(chain, table, directions: list[NullDirection]):
    """(direction, f, verdict, check params) for the first null direction k with table_ij = f k_i k_j
    (f = table_pp / k_p^2 at the first p with k_p != 0), or for the first direction tried when none fits;
    None when there is no direction."""
    n = chain.n
    first = None
    for d in directions:
        p = next((i for i in range(n) if not chain.is_zero(d.lower[i])), None)
        if p is None:
            continue
        f = table[p][p] / (d.lower[p] * d.lower[p])
        residues = [table[i][j] - f * d.lower[i] * d.lower[j] for i in range(n) for j in range(i, n)]
        verdict, check = chain.identity_verdict("T_ab = f k_a k_b", residues, "T_ab - f k_a k_b")
        if d.root != 1:  # k = w R with w rational: T = f w w = (f / R^2) k k
            f = f / _element(chain, sympy.powsimp(d.root ** 2), f"frame.vectors.{d.name}")
        if verdict.holds:
            return d, f, verdict, check
        if first is None:
            first = (d, f, verdict, check)
    return first
