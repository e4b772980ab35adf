"""The Weyl scalars Psi_0 ... Psi_4 in a null tetrad, the invariants I and J, and the algebraic (Petrov) type
of the Weyl tensor, for four-dimensional Lorentzian metrics.

Conventions (stated in the registry formulas and the report): a null tetrad (l, n, m, mbar) with
l.n = -1, m.mbar = 1 and all other products zero, and

    Psi_0 = C(l, m, l, m),  Psi_1 = C(l, n, l, m),  Psi_2 = C(l, m, mbar, n),
    Psi_3 = C(l, n, mbar, n),  Psi_4 = C(n, mbar, n, mbar),   C(u, v, w, x) = C_abcd u^a v^b w^c x^d;

I = Psi_0 Psi_4 - 4 Psi_1 Psi_3 + 3 Psi_2^2, J = det[[Psi_4, Psi_3, Psi_2], [Psi_3, Psi_2, Psi_1],
[Psi_2, Psi_1, Psi_0]].

The tetrad is the user's (``stepper.frames.user_null_tetrad``) when the metric file gives one; otherwise it is
built here: unnormalised vectors w_a by Gram-Schmidt from the coordinate directions (no square roots), their
squared norms N_a, and e_a = w_a / sigma_a with sigma_a = sqrt(|N_a|); l, n = (e_T +- e_S)/sqrt 2 for the
timelike direction T and the first spacelike one S, m = (e_P + i e_Q)/sqrt 2.  The square roots stay exact:
every quantity is held as a sum over products sigma_S of distinct roots with coefficients (real and imaginary
parts) in the chain's arithmetic, reduced with sigma_k^2 = |N_k|, and where a product of squared norms is a
perfect square its root is used instead.

The type is read from the binary quartic Psi_0 + 4 Psi_1 z + 6 Psi_2 z^2 + 4 Psi_3 z^3 + Psi_4 z^4 and its
Hessian covariant H (coefficients h_0 ... h_4, below): O when every Psi vanishes, N when H vanishes
(a fourfold root), D when H is a multiple of the quartic (two double roots), III when I = J = 0, II when
I^3 = 27 J^2, I otherwise (Penrose & Rindler, Spinors and Space-Time vol. 2, sec. 8.3; d'Inverno & Russell-Clark,
J. Math. Phys. 12 (1971) 1258 -- recalled from memory).  Each decision is a zero test of an element, recorded
with how it was made; the type holds where the recorded non-vanishing quantities do not vanish, an open dense
set.
"""

from __future__ import annotations

import itertools
import random
from collections import Counter

import sympy
from sympy.core.function import AppliedUndef

from .algebra import ExpressionArithmetic, UnsupportedByField, ZeroTest, printer_stable
from .identities import signed_stand_ins
from .quantities import formula
from .record import Verdict, as_expression
from .sampling import signed_sample

#: The Weyl scalars' names, in order.
NAMES = ("Psi0", "Psi1", "Psi2", "Psi3", "Psi4")

#: Which tetrad vectors each Weyl scalar contracts C_abcd with (l, n, m, mbar).
SLOTS = {"Psi0": "lmlm", "Psi1": "lnlm", "Psi2": "lmbn", "Psi3": "lnbn", "Psi4": "nbnb"}

#: The quartic's coefficients f_k = BINOMIAL[k] Psi_k (of z^k).
BINOMIAL = (1, 4, 6, 4, 1)

#: Sample points tried for a zero test that the exact form does not settle.
SAMPLE_POINTS = 3
#: Digits of the evaluation at a sample point.
DIGITS = 30

CONVENTION = ("null tetrad l.n = -1, m.mbar = 1; Psi_0 = C(l,m,l,m), Psi_1 = C(l,n,l,m), Psi_2 = C(l,m,mbar,n), "
              "Psi_3 = C(l,n,mbar,n), Psi_4 = C(n,mbar,n,mbar) with C(u,v,w,x) = C_abcd u^a v^b w^c x^d; "
              "I = Psi0 Psi4 - 4 Psi1 Psi3 + 3 Psi2^2, J = det[[Psi4,Psi3,Psi2],[Psi3,Psi2,Psi1],[Psi2,Psi1,Psi0]]")


def record_petrov(chain) -> None:
    """The Weyl scalars and the algebraic type, when the metric is four-dimensional (and Lorentzian)."""
    if chain.n != 4 or not hasattr(chain, "weyl_elements"):
        return
    signature = getattr(chain, "signature", None)
    if signature is not None and signature.count("-") not in (1, 3):
        return
    _Petrov(chain).run()


# ---------------------------------------------------------------------------------------------------
# Elements: sums of coefficient * i^p * sigma_S
# ---------------------------------------------------------------------------------------------------

class _Roots:
    """The algebra of sums  sum_(S, p) c_(S,p) i^p sigma_S  over an arithmetic B, where sigma_S is the
    product of the roots sigma_k (k in the set S, a bit mask), sigma_k^2 = squares[k], and some products
    sigma_R equal known elements roots[R] (perfect squares)."""

    def __init__(self, B, squares: list, roots: dict | None = None):
        self.B = B
        self.squares = squares
        self.roots = dict(roots or {})

    def constant(self, value, imaginary: bool = False) -> dict:
        return {(0, int(imaginary)): self.B.constant(value)} if value else {}

    def add(self, x: dict, y: dict, sign: int = 1) -> dict:
        out = dict(x)
        for key, c in y.items():
            c = c if sign > 0 else -c
            out[key] = out[key] + c if key in out else c
        return out

    def scale(self, x: dict, factor) -> dict:
        return {key: c * factor for key, c in x.items()}

    def mul(self, x: dict, y: dict) -> dict:
        out: dict = {}
        for (s, p), c in x.items():
            for (t, q), d in y.items():
                value = c * d
                common = s & t
                k = 0
                while common >> k:
                    if (common >> k) & 1:
                        value = value * self.squares[k]
                    k += 1
                if p and q:
                    value = -value
                key = (s ^ t, p ^ q)
                out[key] = out[key] + value if key in out else value
        return out

    def reduce(self, x: dict) -> dict:
        """Each sigma_S written over its representative modulo the known perfect squares; zero terms dropped."""
        out: dict = {}
        for (s, p), c in x.items():
            rep, factor = s, None
            for r, root in self.roots.items():
                if (s ^ r) < rep:
                    rep = s ^ r
                    factor = (r, root)
            if factor is not None:
                r, root = factor
                c = c * root
                common = rep & r
                for k in range(4):
                    if (common >> k) & 1:
                        c = c / self.squares[k]
            key = (rep, p)
            out[key] = out[key] + c if key in out else c
        return {key: c for key, c in sorted(out.items()) if not _exactly_zero(self.B, c)}


def _exactly_zero(B, element) -> bool:
    if element == 0 or element == B.zero:
        return True
    return B.name == "field" and not element.num


class _Petrov:
    def __init__(self, chain):
        self.c = chain
        self.A = chain.A
        self.n = chain.n
        self.names = [x.name for x in chain.x]

    # the tetrad ---------------------------------------------------------------------------------------
    def inner(self, u: list, v: list):
        c, g, A = self.c, self.c.g, self.A
        total = A.zero
        for i in range(self.n):
            if c.is_zero(u[i]):
                continue
            for j in range(self.n):
                if c.is_zero(v[j]) or c.is_zero(g[i][j]):
                    continue
                total = total + u[i] * g[i][j] * v[j]
        return total

    def gram_schmidt(self) -> tuple[list, list, list] | None:
        """(order, unnormalised vectors w, squared norms N) in the first order of the coordinates (last
        coordinate first, then the other orders in turn) in which no squared norm vanishes."""
        A, n = self.A, self.n
        for order in itertools.permutations(reversed(range(n))):
            vectors, norms, ok = [], [], True
            for k in order:
                unit = [A.one if i == k else A.zero for i in range(n)]
                w = list(unit)
                for v, N in zip(vectors, norms):
                    coefficient = self.inner(unit, v) / N
                    if not self.c.is_zero(coefficient):
                        w = [wi - coefficient * vi for wi, vi in zip(w, v)]
                norm = self.inner(w, w)
                if self.c.is_zero(norm):
                    ok = False
                    break
                vectors.append(w)
                norms.append(norm)
            if ok:
                return list(order), vectors, norms
        return None

    def run(self) -> None:
        c = self.c
        self.sampler = _Sampler(c)
        user = _user_tetrad(c)
        if user is not None:
            if not self.user_tetrad(*user):
                return
        elif not self.built_tetrad():
            return
        self.weyl_scalars()
        self.invariants()
        self.classify()

    def built_tetrad(self) -> bool:
        c, A = self.c, self.A
        found = self.gram_schmidt()
        if found is None:
            return False
        order, w, N = found
        # the sign of each squared norm: declared signs first, else a sample point
        signs, how = [], []
        point = None
        declared = [_declared_sign(c, c.expr(norm)) for norm in N]
        if None in declared:
            bases = sorted({base for x in N for base in _factors(c.expr(x))[1]}, key=sympy.default_sort_key)
            point = self.sampler.first_point([c.expr(x) for x in N], declared, order, bases)
            if point is None:
                return False
        for norm, sign in zip(N, declared):
            if sign is None:
                value = self.sampler.evaluate(c.expr(norm), point)
                sign = 1 if value > 0 else -1
                how.append("sampled")
            else:
                how.append("declared signs")
            signs.append(sign)
        if signs.count(-1) != 1:
            return False  # not Lorentzian with one timelike direction (or not at the point sampled)
        T = signs.index(-1)
        spatial = sorted((k for k in range(4) if k != T), key=lambda k: order[k])
        S, P, Q = spatial
        labels = [self.names[k] for k in order]
        self.squares = [N[k] * signs[k] for k in range(4)]
        # products of squared norms that are perfect squares: their roots, positive where every |N| is taken
        self.sampler.signs = signs
        self.sampler.norms = [c.expr(x) for x in N]
        if point is not None:
            self.sampler._points.append(point)
        check_point = self.sampler.point_with_signs()
        roots, root_data = {}, []
        if A.name == "field":
            factored = [_factors(c.expr(self.squares[k])) for k in range(4)]
            for mask in range(1, 16):
                members = [k for k in range(4) if (mask >> k) & 1]
                root = _perfect_square_root([factored[k] for k in members])
                if root is None or check_point is None:
                    continue
                if self.sampler.evaluate(root, check_point) < 0:
                    root = -root
                try:
                    roots[mask] = A.from_expr(root)
                except UnsupportedByField:
                    continue
                root_data.append({"directions": [labels[k] for k in members], "value": printer_stable(root)})
        self.R = _Roots(A, self.squares, roots)
        self.sampler.roots = [item["value"] for item in root_data]
        self.frame = {"w": w, "order": order, "signs": signs, "labels": labels, "T": T, "S": S, "P": P, "Q": Q}
        # the tetrad as coefficients over the unnormalised vectors: l = (e_T + e_S)/sqrt2 etc.,
        # e_k = w_k / sigma_k = w_k sigma_k / |N_k|: each vector's k-th part is a root element
        half_root = sympy.sqrt(2) / 2
        def positive(expr):
            return check_point is None or self.sampler.evaluate(expr, check_point) > 0
        sigma = {k: c.expr(roots[1 << k]) if (1 << k) in roots else _root_expr(c.expr(self.squares[k]), positive)
                 for k in range(4)}
        self.sigma = sigma
        e = {k: [c.expr(wi) / sigma[k] for wi in w[k]] for k in range(4)}
        vectors = {
            "l": [half_root * (a + b) for a, b in zip(e[T], e[S])],
            "n": [half_root * (a - b) for a, b in zip(e[T], e[S])],
            "m": [half_root * (a + sympy.I * b) for a, b in zip(e[P], e[Q])],
            "mbar": [half_root * (a - sympy.I * b) for a, b in zip(e[P], e[Q])],
        }
        shown = {name: {self.names[i]: printer_stable(v) for i, v in enumerate(vec) if v != 0}
                 for name, vec in vectors.items()}
        self.tetrad_shown = shown
        sign_how = "declared signs" if all(h == "declared signs" for h in how) else "sampled point"
        params = {
            "built": True, "order": labels,
            "vectors_unnormalised": {labels[k]: {self.names[i]: c.expr(x) for i, x in enumerate(w[k]) if not c.is_zero(x)}
                                     for k in range(4)},
            "squared_norms": {labels[k]: c.expr(N[k]) for k in range(4)},
            "signs": {labels[k]: signs[k] for k in range(4)},
            "signs_from": sign_how,
            "sign_point": _point_data(point) if point is not None else None,
            "timelike": labels[T], "pairs": {"l_n": [labels[T], labels[S]], "m": [labels[P], labels[Q]]},
            "roots": {labels[k]: printer_stable(sigma[k]) for k in range(4)},
            "perfect_squares": root_data,
            "convention": CONVENTION,
        }
        diagonal = all(c.is_zero(c.g[i][j]) for i in range(4) for j in range(4) if i != j)
        how_words = ("the metric is diagonal, so each unnormalised vector w is a coordinate direction"
                     if diagonal else "Gram-Schmidt from the coordinate directions in the order " + ", ".join(labels))
        c.record(id="null_tetrad", kind="frame", quantity="null_tetrad",
                 annotation=(f"Null tetrad built by stepper ({how_words}): e_k = w_k/sqrt|N_k|, "
                             f"l = (e_{labels[T]} + e_{labels[S]})/sqrt2, n = (e_{labels[T]} - e_{labels[S]})/sqrt2, "
                             f"m = (e_{labels[P]} + i e_{labels[Q]})/sqrt2; the timelike direction "
                             f"{labels[T]} is fixed by the signs of the squared norms ({sign_how})."),
                 formula=formula("null_tetrad"), uses=("metric",), result=shown, params=params)
        residues = []
        for a in range(4):
            for b in range(a, 4):
                value = self.inner(w[a], w[b])
                if a == b:
                    value = value - N[a]
                residues.append(value)
        verdict, check = c.identity_verdict(
            "l.n = -1, m.mbar = 1, all other products 0", residues,
            "g(w_a, w_b) - delta_ab N_a for the unnormalised vectors")
        c.record(id="null_tetrad/check", kind="check", quantity="null_tetrad", component="normalisation",
                 annotation="The tetrad is null and normalised: the unnormalised vectors are orthogonal with the "
                            "squared norms listed, so l.n = -1, m.mbar = 1 and every other product vanishes.",
                 formula=r"g(w_a, w_b) = \delta_{ab} N_a", uses=("null_tetrad",), result=verdict,
                 params=check)
        self.tetrad_step = "null_tetrad"
        # each tetrad vector as (frame index, coefficient element) parts: l = sum coefficient * e_k
        third = {"l": [(T, (1, 0)), (S, (1, 0))], "n": [(T, (1, 0)), (S, (-1, 0))],
                 "m": [(P, (1, 0)), (Q, (0, 1))], "b": [(P, (1, 0)), (Q, (0, -1))]}
        self.parts = third
        return True

    def user_tetrad(self, vectors, step_id) -> bool:
        """The user's tetrad (components may hold i and roots): real and imaginary parts in the chain's
        arithmetic when it can hold them, otherwise in sympy's."""
        c = self.c
        split = {}
        for name, vec in zip(("l", "n", "m", "b"), vectors):
            parts = []
            for value in vec:
                value = sympy.expand(as_expression(value))
                imaginary = value.coeff(sympy.I)
                real = sympy.expand(value - sympy.I * imaginary)
                if real.has(sympy.I) or imaginary.has(sympy.I):
                    return False
                parts.append((real, imaginary))
            split[name] = parts
        try:
            B = self.A
            converted = {name: [(B.from_expr(r), B.from_expr(i)) for r, i in parts] for name, parts in split.items()}
        except UnsupportedByField:
            B = ExpressionArithmetic(c.x, list(c.x) + list(c.metric.parameters))
            converted = {name: [(B.from_expr(r), B.from_expr(i)) for r, i in parts] for name, parts in split.items()}
        self.R = _Roots(B, [B.one] * 4)
        self.user_vectors = converted
        self.user_shown = {name: {self.names[i]: printer_stable(as_expression(v)) for i, v in enumerate(vec)
                                  if as_expression(v) != 0}
                           for name, vec in zip(("l", "n", "m", "mbar"), vectors)}
        self.tetrad_step = step_id
        self.frame = None
        return True

    # the Weyl scalars -----------------------------------------------------------------------------------
    def weyl_component(self, i, j, k, l):
        from .chain import canonical_lowered
        sign, key = canonical_lowered((i, j, k, l))
        if sign == 0:
            return None
        value = self.c.weyl_elements.get(key)
        if value is None or self.c.is_zero(value):
            return None
        return value if sign > 0 else -value

    def frame_component(self, a, b, cc, d):
        """C(w_a, w_b, w_c, w_d) (memoised by the canonical order)."""
        from .chain import canonical_lowered
        sign, key = canonical_lowered((a, b, cc, d))
        if sign == 0:
            return None
        if key not in self._frame_memo:
            w = self.frame["w"]
            supports = [[(i, x) for i, x in enumerate(w[k]) if not self.c.is_zero(x)] for k in key]
            total = self.A.zero
            for choice in itertools.product(*supports):
                C = self.weyl_component(*(i for i, _ in choice))
                if C is None:
                    continue
                term = C
                for _, x in choice:
                    term = term * x
                total = total + term
            self._frame_memo[key] = total
        value = self._frame_memo[key]
        return value if sign > 0 else -value

    def scalar_built(self, slots: str) -> dict:
        """Psi for the built tetrad: 1/4 sum over the frame parts of the four slots."""
        R, A = self.R, self.A
        total: dict = {}
        for choice in itertools.product(*(self.parts[s] for s in slots)):
            indices = tuple(k for k, _ in choice)
            value = self.frame_component(*indices)
            if value is None or self.c.is_zero(value):
                continue
            re, im = 1, 0
            for _, (x, y) in choice:
                re, im = re * x - im * y, re * y + im * x
            # e_k = w_k / sigma_k: each index with multiplicity m gives sigma_k^(m mod 2) / |N_k|^ceil(m/2)
            mask = 0
            for k, count in Counter(indices).items():
                value = value / self.squares[k]
                if count % 2:
                    mask |= 1 << k
            if re:
                key = (mask, 0)
                total[key] = total[key] + value * re if key in total else value * re
            if im:
                key = (mask, 1)
                total[key] = total[key] + value * im if key in total else value * im
        return R.reduce(R.scale(total, sympy.Rational(1, 4)))

    def scalar_user(self, slots: str) -> dict:
        B = self.R.B
        vectors = [self.user_vectors[s] for s in slots]
        real, imaginary = B.zero, B.zero
        for i, j, k, l in itertools.product(range(4), repeat=4):
            C = self.weyl_component(i, j, k, l)
            if C is None:
                continue
            re, im = B.one, B.zero
            skip = False
            for vec, index in zip(vectors, (i, j, k, l)):
                x, y = vec[index]
                if _exactly_zero(B, x) and _exactly_zero(B, y):
                    skip = True
                    break
                re, im = re * x - im * y, re * y + im * x
            if skip:
                continue
            C = C if B is self.A else B.from_expr(self.c.expr(C))
            real, imaginary = real + C * re, imaginary + C * im
        return self.R.reduce({(0, 0): real, (0, 1): imaginary})

    def weyl_scalars(self) -> None:
        c = self.c
        self._frame_memo = {}
        self.psi = {}
        for name in NAMES:
            c.progress(f"weyl scalar {name}", 0, 1)
            self.psi[name] = (self.scalar_built(SLOTS[name]) if self.frame is not None
                              else self.scalar_user(SLOTS[name]))
        shown = {name: self.shown(self.psi[name]) for name in NAMES}
        parts = {name: self.parts_data(self.psi[name]) for name in NAMES}
        c.results["weyl_scalars"] = shown
        c.record(id="weyl_scalars", kind="frame components", quantity="weyl_scalars",
                 annotation="Weyl scalars: the Weyl tensor contracted with the null tetrad.",
                 formula=formula("weyl_scalars"), uses=("weyl", self.tetrad_step), result=shown,
                 params={"parts": parts, "convention": CONVENTION,
                         **({"tetrad": self.user_shown} if self.frame is None else {})})

    def label_of(self, mask: int) -> list[str]:
        labels = self.frame["labels"] if self.frame is not None else []
        return [labels[k] for k in range(4) if (mask >> k) & 1]

    def parts_data(self, element: dict) -> list[dict]:
        """[{"roots": [directions whose sigma multiply], "imaginary": bool, "coefficient": expr}]"""
        B = self.R.B
        return [{"roots": self.label_of(mask), "imaginary": bool(p), "coefficient": _to_expr(B, value)}
                for (mask, p), value in sorted(element.items())]

    def shown(self, element: dict) -> sympy.Expr:
        B = self.R.B
        total = sympy.Integer(0)
        for (mask, p), value in sorted(element.items()):
            term = _to_expr(B, value) * (sympy.I if p else 1)
            for k in range(4):
                if (mask >> k) & 1:
                    term = term * self.sigma[k]
            total = total + term
        return printer_stable(total)

    # invariants and type ---------------------------------------------------------------------------------
    def invariants(self) -> None:
        R, p = self.R, self.psi
        three = sympy.Integer(3)
        I = R.add(R.add(R.mul(p["Psi0"], p["Psi4"]), R.scale(R.mul(p["Psi1"], p["Psi3"]), -4)),
                  R.scale(R.mul(p["Psi2"], p["Psi2"]), three))
        # J = Psi4 (Psi2 Psi0 - Psi1^2) - Psi3 (Psi3 Psi0 - Psi1 Psi2) + Psi2 (Psi3 Psi1 - Psi2^2)
        m1 = R.add(R.mul(p["Psi2"], p["Psi0"]), R.mul(p["Psi1"], p["Psi1"]), -1)
        m2 = R.add(R.mul(p["Psi3"], p["Psi0"]), R.mul(p["Psi1"], p["Psi2"]), -1)
        m3 = R.add(R.mul(p["Psi3"], p["Psi1"]), R.mul(p["Psi2"], p["Psi2"]), -1)
        J = R.add(R.add(R.mul(p["Psi4"], m1), R.mul(p["Psi3"], m2), -1), R.mul(p["Psi2"], m3))
        self.I, self.J = R.reduce(I), R.reduce(J)

    def hessian(self) -> list[dict]:
        """Coefficients h_0 ... h_4 (of z^k) of the Hessian f_xx f_yy - f_xy^2 / 144 of the quartic
        f = sum_k BINOMIAL[k] Psi_k x^k y^(4-k):
        h_0 = Psi0 Psi2 - Psi1^2, h_1 = 2 (Psi0 Psi3 - Psi1 Psi2), h_2 = Psi0 Psi4 + 2 Psi1 Psi3 - 3 Psi2^2,
        h_3 = 2 (Psi1 Psi4 - Psi2 Psi3), h_4 = Psi2 Psi4 - Psi3^2 (up to a constant factor)."""
        R, p = self.R, [self.psi[name] for name in NAMES]
        return [R.reduce(R.add(R.mul(p[0], p[2]), R.mul(p[1], p[1]), -1)),
                R.reduce(R.scale(R.add(R.mul(p[0], p[3]), R.mul(p[1], p[2]), -1), 2)),
                R.reduce(R.add(R.add(R.mul(p[0], p[4]), R.scale(R.mul(p[1], p[3]), 2)),
                               R.scale(R.mul(p[2], p[2]), 3), -1)),
                R.reduce(R.scale(R.add(R.mul(p[1], p[4]), R.mul(p[2], p[3]), -1), 2)),
                R.reduce(R.add(R.mul(p[2], p[4]), R.mul(p[3], p[3]), -1))]

    def decide(self, label: str, elements: list[tuple[str, dict]]) -> dict:
        """Whether every element vanishes: the first one not shown to vanish decides "no"."""
        undecided = None
        for name, element in elements:
            test = self.zero_test(element)
            if test["vanishes"] is False:
                return {"question": label, "vanishes": False, "decided_by": name, "test": test,
                        "elements": [name for name, _ in elements]}
            if test["vanishes"] is None and undecided is None:
                undecided = (name, test)
        if undecided is not None:
            return {"question": label, "vanishes": None, "decided_by": undecided[0], "test": undecided[1],
                    "elements": [name for name, _ in elements]}
        how = "canonical form" if self.R.B.name == "field" else "simplify"
        return {"question": label, "vanishes": True, "decided_by": "", "count": len(elements),
                "elements": [name for name, _ in elements], "test": {"how": how, "vanishes": True}}

    def zero_test(self, element: dict) -> dict:
        B = self.R.B
        if not element:
            return {"how": "canonical form" if B.name == "field" else "cancel", "vanishes": True}
        if B.name != "field":
            tests = [B.zero_test(value) for value in element.values()]
            if all(t.vanishes for t in tests):
                return {"how": "simplify", "vanishes": True}
        elif len(element) == 1:  # one product of roots (never zero) times a non-zero canonical form
            return {"how": "canonical form", "vanishes": False}
        return self.sampler.point_test(self, element)

    def classify(self) -> None:
        c, R = self.c, self.R
        psi = [(name, self.psi[name]) for name in NAMES]
        H = self.hessian()
        decisions = []
        verdict_type = None

        def ask(label, elements):
            decision = self.decide(label, elements)
            decisions.append(decision)
            return decision["vanishes"]

        undecided = False
        def minors():
            # H = c f: with f_k0 != 0 (the Psi that decided the first question), h_k f_k0 - h_k0 f_k = 0 for all k
            first = decisions[0]["decided_by"]
            k0 = NAMES.index(first) if first in NAMES else 0
            ks = [k for k in range(5) if k != k0] if first in NAMES else [k for k in range(5)]
            pairs = [(k0, k) for k in ks] if first in NAMES else [(i, j) for i in range(5) for j in range(i + 1, 5)]
            return [(f"h{i} f{j} - h{j} f{i}",
                     R.reduce(R.add(R.scale(R.mul(H[i], self.psi[NAMES[j]]), BINOMIAL[j]),
                                    R.scale(R.mul(H[j], self.psi[NAMES[i]]), BINOMIAL[i]), -1)))
                    for i, j in pairs]

        for label, elements, answer in (
                ("weyl_scalars_vanish", lambda: psi, "O"),
                ("hessian_vanishes", lambda: [(f"h{k}", h) for k, h in enumerate(H)], "N"),
                ("hessian_proportional", minors, "D"),
                ("invariants_vanish", lambda: [("I", self.I), ("J", self.J)], "III")):
            outcome = ask(label, elements())
            if outcome is None and decisions[-1]["test"].get("how") != "sampled":
                undecided = True  # no sample point could be evaluated
                break
            if outcome is not False:  # proven zero, or zero at every sample point (evidence)
                verdict_type = answer
                break
        if verdict_type is None and not undecided:
            I3 = R.mul(R.mul(self.I, self.I), self.I)
            J2 = R.scale(R.mul(self.J, self.J), 27)
            outcome = ask("special", [("I^3 - 27 J^2", R.reduce(R.add(I3, J2, -1)))])
            if outcome is not None or decisions[-1]["test"].get("how") == "sampled":
                verdict_type = "I" if outcome is False else "II"
        invariants = {"I": self.shown(self.I), "J": self.shown(self.J)}
        hessian = [self.shown(h) for h in H]
        evidence = _evidence(verdict_type, decisions)
        if verdict_type is None:
            statement = "The algebraic type of the Weyl tensor is not decided."
            holds = None
        else:
            statement = (f"The Weyl tensor is of algebraic (Petrov) type {verdict_type}"
                         + (" everywhere." if verdict_type == "O" else
                            " on the open dense set where the quantities found non-zero do not vanish."))
            holds = True if all(d["vanishes"] is not None for d in decisions) else None
        verdict = Verdict(statement, holds, evidence)
        c.results["algebraic_type"] = {"type": verdict_type, "invariants": invariants, "holds": holds,
                                       "evidence": evidence}
        c.record(id="algebraic_type", kind="verdict", quantity="algebraic_type", annotation=statement,
                 formula=formula("algebraic_type"), uses=("weyl_scalars",), result=verdict,
                 params={"type": verdict_type, "invariants": invariants, "hessian": hessian,
                         "invariant_parts": {"I": self.parts_data(self.I), "J": self.parts_data(self.J)},
                         "decisions": decisions, "generic": verdict_type not in (None, "O")})


def _evidence(kind, decisions: list[dict]) -> str:
    words = {"weyl_scalars_vanish": "every Psi_k vanishes", "hessian_vanishes": "the Hessian covariant H vanishes",
             "hessian_proportional": "H is a multiple of the quartic", "invariants_vanish": "I = J = 0",
             "special": "I^3 = 27 J^2"}
    parts = []
    for d in decisions:
        test = d["test"]
        if d["vanishes"] is True:
            parts.append(f"{words[d['question']]} ({test['how']})")
        elif d["vanishes"] is False:
            where = ("non-zero at a sample point, |value| = " + f"{test.get('magnitude', 0):.3g}"
                     if test.get("how") == "point" else test.get("how", ""))
            parts.append(f"not: {words[d['question']]} ({d['decided_by']} {where})")
        else:
            parts.append(f"undecided: {words[d['question']]} ({d['decided_by']} vanishes at "
                         f"{test.get('points', 0)} sample points to {test.get('digits', 0)} digits: evidence, "
                         "not proof)")
    return "; ".join(parts)


# ---------------------------------------------------------------------------------------------------
# Helpers
# ---------------------------------------------------------------------------------------------------

def _user_tetrad(chain):
    try:
        from .frames import user_null_tetrad  # type: ignore[attr-defined]
    except ImportError:
        return None
    return user_null_tetrad(chain)


def _to_expr(B, element) -> sympy.Expr:
    return printer_stable(B.to_expr(element))


def _function_values(expr: sympy.Expr, functions: dict, values: dict) -> dict:
    """{f(x): its value, Derivative(f(x), ...): its value} at the point, for the free functions of ``expr``
    (each given as a polynomial in ``functions``): numbers go in, so that no symbolic exp(polynomial) is built
    (sympy asks about its sign, which costs milliseconds each)."""
    out = {}
    for d in expr.atoms(sympy.Derivative):
        if d.expr in functions:
            out[d] = functions[d.expr].diff(*d.variable_count).xreplace(values)
    for f in expr.atoms(AppliedUndef):
        if f in functions:
            out[f] = functions[f].xreplace(values)
    return out


def _declared_sign(chain, value: sympy.Expr) -> int | None:
    expr = sympy.factor(value)
    numerator, denominator = sympy.fraction(expr)
    product, _ = signed_stand_ins(numerator * denominator, chain.metric.function_signs)
    if product.is_positive:
        return 1
    if product.is_negative:
        return -1
    return None


def _root_expr(value: sympy.Expr, positive) -> sympy.Expr:
    """sqrt(value) written as sqrt(numerator)/sqrt(denominator) of its factored form (both negated when the
    numerator is negative at the point where the signs were taken: ``positive(numerator)`` is False)."""
    numerator, denominator = sympy.fraction(sympy.factor(value))
    if not positive(numerator):
        numerator, denominator = sympy.factor(-numerator), sympy.factor(-denominator)
    return sympy.sqrt(numerator) / sympy.sqrt(denominator)


def _factors(value: sympy.Expr) -> tuple[sympy.Rational, dict]:
    """(rational coefficient, {irreducible factor: exponent}) of a rational function, exponents of the
    denominator's factors negative."""
    numerator, denominator = sympy.fraction(sympy.together(value))
    coefficient, out = sympy.Integer(1), {}
    for part, power in ((numerator, 1), (denominator, -1)):
        try:
            c, factors = sympy.factor_list(part)
        except sympy.PolynomialError:  # not a polynomial (a fractional power on the sympy path): one factor
            c, factors = (part, []) if part.is_Number else (sympy.Integer(1), [(part, 1)])
        coefficient = coefficient * sympy.Rational(c) ** power
        for base, exponent in factors:
            out[base] = out.get(base, 0) + power * exponent
    return coefficient, out


def _perfect_square_root(parts: list) -> sympy.Expr | None:
    """A rational function r with r^2 = the product of the factored values, or None when a factor has an
    odd power (or the rational coefficient is not a square)."""
    coefficient, exponents = sympy.Integer(1), {}
    for c, factors in parts:
        coefficient = coefficient * c
        for base, exponent in factors.items():
            exponents[base] = exponents.get(base, 0) + exponent
    c = sympy.sqrt(coefficient)
    if not c.is_Rational:
        return None
    root = c
    for base, exponent in sorted(exponents.items(), key=lambda item: sympy.default_sort_key(item[0])):
        if exponent % 2:
            return None
        root = root * base ** (exponent // 2)
    return root


def _point_data(point: dict) -> dict:
    return {"values": [[s, v] for s, v in point["values"].items()],
            "functions": [[f, p] for f, p in point["functions"].items()]}


class _Sampler:
    """Exact sample points: rational values of the symbols (with their declared signs) and free functions
    replaced by fixed polynomials; the same points for every test of one derivation."""

    def __init__(self, chain):
        self.c = chain
        symbols = set(chain.x) | set(chain.metric.parameters) | set(chain.metric.extra_symbols)
        for value in chain.metric.matrix:
            symbols |= value.free_symbols
        self.symbols = sorted(symbols, key=lambda s: s.name)
        functions = set()
        for value in chain.metric.matrix:
            functions |= value.atoms(AppliedUndef)
        self.functions = sorted(functions, key=sympy.default_sort_key)
        self.rng = random.Random(20261202)
        self.signs = None
        self.norms = None
        self.roots: list = []
        self._points: list = []

    def draw(self) -> dict:
        # coordinates range wider than parameters, so that points outside horizons (r > 2M) are common
        values = {s: signed_sample(s, self.rng, 1100, 12900 if s in self.c.x else 2900, positive_share=0.5,
                                   negative_divisor=3)
                  for s in self.symbols}
        functions = {}
        for f in self.functions:
            poly = sympy.Rational(self.rng.randint(5, 15), 7)
            for a in f.args:
                poly += (sympy.Rational(self.rng.randint(1, 9), 11) * a
                         + sympy.Rational(self.rng.randint(1, 9), 13) * a ** 2
                         + sympy.Rational(self.rng.randint(1, 9), 17) * a ** 3)
            functions[f] = poly
        return {"values": values, "functions": functions}

    def evaluate(self, expr: sympy.Expr, point: dict, digits: int = DIGITS):
        expr = as_expression(expr)
        if point["functions"]:
            expr = expr.xreplace(_function_values(expr, point["functions"], point["values"]))
        return expr.xreplace(point["values"]).evalf(digits)  # exact rationals in, rounded once at the end

    def first_point(self, norms: list, declared: list, order: list, bases: list):
        """A point where every squared norm is finite and non-zero, with one negative (and the declared
        signs); of up to 16 draws, the one whose timelike direction comes earliest among the coordinates, then
        the one where the fewest irreducible factors of the norms (``bases``) are negative (the first draw that
        no later one could beat ends the search)."""
        best = None
        for draw in range(16):
            point = self.draw()
            values = [self.evaluate(x, point) for x in norms]
            if not all(v.is_real and v.is_finite and v != 0 for v in values):
                continue
            if any(d is not None and (v > 0) != (d > 0) for v, d in zip(values, declared)):
                continue
            negative = [order[k] for k, v in enumerate(values) if v < 0]
            if len(negative) != 1:
                continue
            rank = (negative[0], sum(1 for b in bases if self.evaluate(b, point) < 0))
            if best is None or rank < best[0]:
                best = (rank, point)
            if rank == (min(order), 0):  # no later draw can rank higher: draw them without evaluating, so
                for _ in range(draw + 1, 16):  # that the points drawn after these are the same as ever
                    self.draw()
                break
        return None if best is None else best[1]

    def point_with_signs(self):
        """The next point where every squared norm has the recorded sign (the roots are real there)."""
        if self._points:
            return self._points[0]
        for _ in range(60):
            point = self.draw()
            values = [self.evaluate(x, point) for x in self.norms]
            if all(v.is_real and v.is_finite and v != 0 and (v > 0) == (s > 0) for v, s in zip(values, self.signs)):
                self._points.append(point)
                return point
        return None

    def points(self, count: int) -> list:
        tries = 0
        while len(self._points) < count and tries < 80:
            tries += 1
            point = self.draw()
            if self.norms is not None:
                values = [self.evaluate(x, point) for x in self.norms]
                if not all(v.is_real and v.is_finite and v != 0 and (v > 0) == (s > 0)
                           for v, s in zip(values, self.signs)):
                    continue
                # the perfect-square roots must be positive there too, as the products of roots they stand for
                if not all(self.evaluate(root, point) > 0 for root in self.roots):
                    continue
            self._points.append(point)
        return self._points[:count]

    def value(self, petrov: _Petrov, element: dict, point: dict):
        B = petrov.R.B
        total = sympy.Integer(0)
        for (mask, p), coefficient in element.items():
            term = self.evaluate(_to_expr(B, coefficient), point, DIGITS + 10)
            for k in range(4):
                if (mask >> k) & 1:
                    term = term * sympy.sqrt(self.evaluate(petrov.c.expr(petrov.squares[k]), point, DIGITS + 10))
            total = total + term * (sympy.I if p else 1)
        return sympy.N(total, DIGITS)

    def point_test(self, petrov: _Petrov, element: dict) -> dict:
        worst, tried = 0.0, 0
        for point in self.points(SAMPLE_POINTS):
            value = self.value(petrov, element, point)
            if not value.is_finite:
                continue
            tried += 1
            magnitude = abs(complex(value))
            if magnitude > 10 ** (-(DIGITS - 10)):
                return {"how": "point", "vanishes": False, "magnitude": float(f"{magnitude:.3g}"),
                        "point": _point_data(point)}
            worst = max(worst, magnitude)
        if tried == 0:
            return {"how": "no point", "vanishes": None}
        return {"how": "sampled", "vanishes": None, "points": tried, "digits": DIGITS - 10}
