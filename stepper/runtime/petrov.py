"""The notebook's helpers for the Weyl scalars and the algebraic (Petrov) type: the null tetrad rebuilt by
Gram-Schmidt, sums of roots of squared norms held exactly, the Weyl scalars, I and J, and the type read
again from the recorded decisions.

Inlined into derivation.ipynb (the part between the marker lines) when the derivation has the Weyl scalars;
importable here for unit tests, with the core helpers and the names the notebook defines first.
"""

import itertools  # noqa: F401  (used by the inlined helpers)

import sympy as sp  # noqa: F401

from stepper.runtime.core import *  # noqa: F401,F403  (the notebook defines these before this part)

# Defined by the notebook's cells before these helpers run (a test sets them).
metric: dict = {}
weyl: dict = {}

# ---- inlined into the notebook from here ----
# ---------------------------------------------------------------------------
# The null tetrad, the Weyl scalars and the algebraic type
# ---------------------------------------------------------------------------

# Set by the null tetrad's cell: the Gram-Schmidt order, the unnormalised vectors w_k and their squared norms
# times their signs (|N_k|), the products of |N_k| that are perfect squares, and the tetrad's pairs.
tetrad_order = []
tetrad_unnormalised = {}
tetrad_squares = {}
tetrad_norms = {}
tetrad_perfect_squares = []
tetrad_pairs = {}

# Set by the cells of the tetrad, the Weyl scalars and the type.
tetrad_roots = {}
weyl_scalar_values = {}
recorded_parts = {}
recorded_type = None
recorded_invariants = {}
decisions = []

# Which tetrad vectors each Weyl scalar contracts C_abcd with: l, n, m, and b for mbar.
WEYL_SCALAR_SLOTS = {"Psi0": "lmlm", "Psi1": "lnlm", "Psi2": "lmbn", "Psi3": "lnbn", "Psi4": "nbnb"}


def weyl_lowered(a, b, c, d):
    """C_abcd from the recorded components (a < b, c < d, (a, b) <= (c, d) in the coordinate order)."""
    position = index_names.index
    if a == b or c == d:
        return sp.S.Zero
    sign = 1
    if position(a) > position(b):
        a, b, sign = b, a, -sign
    if position(c) > position(d):
        c, d, sign = d, c, -sign
    if (position(a), position(b)) > (position(c), position(d)):
        a, b, c, d = c, d, a, b
    return sign * component(weyl, a, b, c, d)


def metric_inner(u, v):
    """g(u, v) for vectors given as {coordinate name: component}."""
    return sp.cancel(sum((u[i] * v[j] * component(metric, i, j) for i in u for j in v), sp.S.Zero))


def gram_schmidt_tetrad(order):
    """w_k = d_k - sum over earlier j of g(d_k, w_j)/N_j w_j in the given order of coordinates; with N_k = g(w_k, w_k)."""
    vectors, norms = {}, {}
    for k in order:
        unit = {i: (sp.S.One if i == k else sp.S.Zero) for i in index_names}
        w = dict(unit)
        for j in vectors:
            coefficient = sp.cancel(metric_inner(unit, vectors[j]) / norms[j])
            w = {i: sp.cancel(w[i] - coefficient * vectors[j][i]) for i in index_names}
        vectors[k] = w
        norms[k] = metric_inner(w, w)
    return vectors, norms


def at_point(expr, point):
    """expr at a recorded sample point: free functions replaced by their polynomials, then symbols by numbers."""
    expr = expression(expr)
    functions = {expression(f): expression(p) for f, p in point["functions"]}
    if functions:
        expr = expr.subs(functions).doit()
    return expr.subs({expression(s): expression(v) for s, v in point["values"]})


def check_null_tetrad(step, order, unnormalised, norms, signs, roots, perfect_squares, vectors, pairs, sign_point):
    """Rebuild the unnormalised vectors and squared norms; check the signs, the roots sqrt|N_k|, the perfect
    squares, and that each recorded tetrad vector is the stated combination of e_k = w_k / sqrt|N_k|."""
    global tetrad_order, tetrad_unnormalised, tetrad_squares, tetrad_perfect_squares, tetrad_pairs, tetrad_norms
    w, N = gram_schmidt_tetrad(order)
    for k in order:
        check(step, norms[k], N[k], part=f"squared norm N_{k}")
        for i in index_names:
            check(step, unnormalised[k].get(i, 0), w[k][i], part=f"w_{k}^{i}")
        if sign_point is not None:
            value = sp.N(at_point(N[k], sign_point), 30)
            if (value > 0) != (signs[k] > 0):
                raise AssertionError(f"step {step}: N_{k} has not the recorded sign at the recorded point")
        elif not (sp.factor(N[k] * signs[k]).is_positive or vanishes(N[k] * signs[k] - abs(N[k]))):
            print(f"{step}: the sign of N_{k} is taken as recorded (declared signs)")
        check(step, sp.expand(expression(roots[k]) ** 2), signs[k] * N[k], part=f"sqrt|N_{k}| squared")
    squares = {k: signs[k] * N[k] for k in order}
    for directions, value in perfect_squares:
        product = sp.Mul(*(squares[k] for k in directions))
        check(step, sp.expand(expression(value) ** 2), product, part=f"perfect square over {directions}")
    half = sp.sqrt(2) / 2
    e = {k: {i: w[k][i] / expression(roots[k]) for i in index_names} for k in order}
    T, S = pairs["l_n"]
    P, Q = pairs["m"]
    built = {"l": {i: half * (e[T][i] + e[S][i]) for i in index_names},
             "n": {i: half * (e[T][i] - e[S][i]) for i in index_names},
             "m": {i: half * (e[P][i] + sp.I * e[Q][i]) for i in index_names},
             "mbar": {i: half * (e[P][i] - sp.I * e[Q][i]) for i in index_names}}
    for name in built:
        for i in index_names:
            check(step, vectors[name].get(i, 0), built[name][i], part=f"{name}^{i}")
    use_petrov_field(list(squares.values()) + [value for _, value in perfect_squares] + list(weyl.values())
                     + [v for vector in w.values() for v in vector.values()], list(weyl.values()))
    tetrad_order, tetrad_unnormalised, tetrad_squares, tetrad_norms = list(order), w, squares, N
    tetrad_perfect_squares = [(list(directions), expression(value)) for directions, value in perfect_squares]
    tetrad_pairs = {"l": [(T, 1), (S, 1)], "n": [(T, 1), (S, -1)], "m": [(P, 1), (Q, sp.I)], "b": [(P, 1), (Q, -sp.I)]}
    return built


def petrov_field(expressions):
    """One sympy fraction field holding every coefficient below: each sin/cos (sinh/cosh) of a symbol and each
    free function or derivative is a new symbol; the relations cos**2 + sin**2 - 1 (cosh**2 - sinh**2 - 1),
    cosines first in lex order, decide zeros exactly (a numerator is zero when its remainder by them is).
    Returns (into, back, is_zero, tidy): into(expr) -> field element, back(element) -> expr, is_zero(element),
    tidy(element) -> its canonical form."""
    expressions = [expression(e) for e in expressions]
    for head, rule in trigonometric_rewrites.items():
        expressions = [e.replace(head, rule) if e.has(head) else e for e in expressions]
    fresh, pairs = {}, []
    for cosine, sine, sign in ((sp.cos, sp.sin, 1), (sp.cosh, sp.sinh, -1)):
        for x in sorted({f.args[0] for e in expressions for f in e.atoms(cosine, sine)}, key=sp.default_sort_key):
            c, s = sp.Dummy("c", real=True), sp.Dummy("s", real=True)
            fresh[cosine(x)], fresh[sine(x)] = c, s
            pairs.append((c, s, sign))
    for f in sorted({a for e in expressions for a in e.atoms(sp.Derivative, sp.core.function.AppliedUndef)},
                    key=sp.default_sort_key):
        fresh[f] = sp.Dummy("f")
    # anything else a rational function cannot hold (exp, roots, ...) is a new symbol too: a zero shown
    # with it is a zero, a non-zero may be one that identities of these functions would cancel
    others = set()
    for e in expressions:
        plain = e.xreplace(fresh)
        others |= {a for a in plain.atoms(sp.Function) if not isinstance(a, sp.core.function.AppliedUndef)}
        others |= {a for a in plain.atoms(sp.Pow) if not a.exp.is_Integer}
    for a in sorted(others, key=sp.default_sort_key):
        fresh[a] = sp.Dummy("g")
    cosines, sines = [c for c, _, _ in pairs], [s for _, s, _ in pairs]
    rest = set(coordinates)
    for e in expressions:
        rest |= e.xreplace(fresh).free_symbols
    rest = sorted(rest - set(cosines) - set(sines), key=sp.default_sort_key)
    field, *variables = sp.field(cosines + sines + rest, sp.QQ, order="lex")
    variable = dict(zip(cosines + sines + rest, variables))
    relations = [variable[c] ** 2 + sign * variable[s] ** 2 - 1 for c, s, sign in pairs]
    relations = [r.numer for r in relations]
    back = {symbol: original for original, symbol in fresh.items()}

    def into(expr):
        expr = expression(expr)
        for head, rule in trigonometric_rewrites.items():
            if expr.has(head):
                expr = expr.replace(head, rule)
        plain = expr.xreplace(fresh)
        new = {a: sp.Dummy("g") for a in plain.atoms(sp.Function, sp.Pow)
               if (isinstance(a, sp.Pow) and not a.exp.is_Integer)
               or (isinstance(a, sp.Function) and a not in variable)}
        if new:  # not among the expressions the field was made for
            raise AssertionError(f"the helpers' field cannot hold {sorted(new, key=sp.default_sort_key)[0]}")
        return field.from_expr(plain)

    def out(element):
        return element.as_expr().xreplace(back)

    cosine_variables = [variable[c].numer for c in cosines]
    ring = field.ring

    def tidy(element):
        """The canonical form: cos**2 replaced by 1 - sin**2 (cosh**2 by 1 + sinh**2), then the denominator
        made free of cosines by multiplying with its conjugate d0 - d1 cos, then cancelled."""
        if not relations:
            return element
        numerator, denominator = element.numer.rem(relations), element.denom.rem(relations)
        for c in cosine_variables:
            k = ring.gens.index(c)
            if denominator.degree(k) < 1:
                continue
            d1 = ring({m[:k] + (0,) + m[k + 1:]: v for m, v in denominator.terms() if m[k] == 1})
            d0 = denominator - d1 * c
            conjugate = d0 - d1 * c
            numerator, denominator = (numerator * conjugate).rem(relations), (denominator * conjugate).rem(relations)
        if not numerator:
            return field.zero
        return field(numerator) / field(denominator)

    def is_zero(element):
        return not element.numer or (bool(relations) and not element.numer.rem(relations))
    return into, out, is_zero, tidy


def point_rational(key):
    """The exact point's value for key (text): a positive rational p/q with p, q up to 10**6, from a generator
    seeded with the key, so every atom has its own value whatever the order it is met in."""
    import random
    generator = random.Random(f"petrov point {key}")
    return sp.Rational(generator.randint(1, 10 ** 6), generator.randint(1, 10 ** 6))


def _point_key(atom):
    """An atom's key for its value at the point: its printed form, so a name has one value whatever
    assumptions the symbol was built with."""
    return sp.sstr(atom)


def point_values(expr, opaque):
    """The values the exact point gives the atoms of expr: each symbol, each free function and each of its
    derivatives a rational of its own; each cos(x), sin(x) pair (1 - u**2)/(1 + u**2), 2u/(1 + u**2) and each
    cosh(x), sinh(x) pair (1 + u**2)/(1 - u**2), 2u/(1 - u**2) with a u of their own (so cos**2 + sin**2 = 1,
    cosh**2 - sinh**2 = 1 hold there); with opaque, every other function and non-integer power a rational of
    its own too (the field takes them as new symbols), else they are left to be evaluated."""
    values = {}
    for a in expr.atoms(sp.Derivative, sp.core.function.AppliedUndef):
        values[a] = point_rational(_point_key(a))
    for a in expr.atoms(sp.cos, sp.sin):
        u = point_rational("circle " + _point_key(a.args[0]))
        values[a] = (1 - u ** 2) / (1 + u ** 2) if isinstance(a, sp.cos) else 2 * u / (1 + u ** 2)
    for a in expr.atoms(sp.cosh, sp.sinh):
        v = point_rational("hyperbola " + _point_key(a.args[0]))
        u = v / (1 + v)  # in (0, 1)
        values[a] = (1 + u ** 2) / (1 - u ** 2) if isinstance(a, sp.cosh) else 2 * u / (1 - u ** 2)
    if opaque:
        for a in expr.atoms(sp.Function, sp.Pow):
            if a not in values and (isinstance(a, sp.Function) or not a.exp.is_Integer):
                values[a] = point_rational(_point_key(a))
    for a in expr.free_symbols:
        values.setdefault(a, point_rational(_point_key(a)))
    return values


def at_petrov_point(expr, opaque=True):
    """expr at the exact point (see point_values): an exact number when opaque, else an expression of numbers."""
    expr = expression(expr)
    for head, rule in trigonometric_rewrites.items():
        if expr.has(head):
            expr = expr.replace(head, rule)
    value = expr.xreplace(point_values(expr, opaque))
    if value.has(sp.zoo, sp.nan, sp.oo) or value.free_symbols:
        raise AssertionError("the helpers' exact point is a pole of an expression, or leaves a symbol")
    return value


def number_at_petrov_point(expr):
    """expr at the exact point to 50 digits, square roots and other functions evaluated (principal branch)."""
    return complex_number(sp.N(at_petrov_point(expr, opaque=False), 50))


def complex_number(value):
    re, im = value.as_real_imag()
    return sp.N(re, 50), sp.N(im, 50)


def numbers_agree(a, b):
    """Whether two 50-digit complex values (pairs) agree to 40 digits relative to their size."""
    scale = max(1, abs(a[0]), abs(a[1]), abs(b[0]), abs(b[1]))
    return abs(a[0] - b[0]) <= scale * sp.Float("1e-40", 50) and abs(a[1] - b[1]) <= scale * sp.Float("1e-40", 50)


def petrov_point(expressions):
    """The exact point mode: the same (into, back, is_zero, tidy) as petrov_field, with every coefficient the
    exact rational its expression takes at one pseudo-random rational point (see point_values). A non-zero
    there is a non-zero; a zero there is a zero with high probability only (Schwartz-Zippel: a non-zero
    rational function of degree d vanishes at a point drawn from a set of S values per variable with
    probability at most d/S, here S is about 10**12)."""
    def into(expr):
        return at_petrov_point(expr)

    def out(element):
        return element

    def is_zero(element):
        return element == 0

    def tidy(element):
        return element
    return into, out, is_zero, tidy


# Above this size (the sum of sympy.count_ops over the recorded Weyl components) the helpers compute at one
# exact rational point (petrov_point) instead of in the fraction field (petrov_field), which is far too slow
# for them: the static black hole's components measure 31, the rotating black hole's 433.
POINT_MODE_SIZE = 200

# Set by check_null_tetrad: the field of the coefficients (see petrov_field and petrov_point), and which.
field_into, field_out, field_is_zero, field_tidy = None, None, None, None
petrov_mode = "field"


def petrov_size(expressions):
    """The size use_petrov_field decides the mode by: the sum of sympy.count_ops of the expressions."""
    return sum(sp.count_ops(expression(e)) for e in expressions)


def use_petrov_field(expressions, weyl_components=None):
    """Make petrov_field(expressions) the field every helper below computes in, or petrov_point(expressions)
    when the Weyl components (default: the expressions) are larger than POINT_MODE_SIZE."""
    global field_into, field_out, field_is_zero, field_tidy, petrov_mode
    size = petrov_size(expressions if weyl_components is None else weyl_components)
    petrov_mode = "point" if size > POINT_MODE_SIZE else "field"
    make = petrov_point if petrov_mode == "point" else petrov_field
    field_into, field_out, field_is_zero, field_tidy = make(expressions)


def point_mode_note(step):
    if petrov_mode == "point":
        print(f"{step}: the expressions are large, so this is checked at one exact pseudo-random rational point: "
              "a non-zero there is a non-zero; a zero there (a recorded zero, a part that agrees) is a zero "
              "with high probability only (Schwartz-Zippel)")


def same_value(a, b):
    """Whether a = b exactly: the cross product of numerators and denominators vanishes modulo the relations
    (at the exact point: the two numbers are equal)."""
    if petrov_mode == "point":
        return a == b
    return field_is_zero(a.raw_new(a.numer * b.denom - b.numer * a.denom, a.denom * b.denom))


def root_mask(directions):
    return sum(1 << tetrad_order.index(k) for k in directions)


def reduce_roots(x):
    """Each product of roots sigma_S over its representative modulo the perfect squares (sigma_S sigma_R =
    sigma_(S xor R) times |N_k| for k in both); coefficients cancelled, zero ones dropped."""
    perfect = [(root_mask(directions), field_into(value)) for directions, value in tetrad_perfect_squares]
    out = {}
    for (s, p), c in x.items():
        rep, factor = s, None
        for r, value in perfect:
            if (s ^ r) < rep:
                rep, factor = s ^ r, (r, value)
        if factor is not None:
            r, value = factor
            c = c * value
            for k, label in enumerate(tetrad_order):
                if ((rep & r) >> k) & 1:
                    c = c / field_into(tetrad_squares[label])
        out[rep, p] = out[rep, p] + c if (rep, p) in out else c
    out = {key: field_tidy(value) for key, value in sorted(out.items())}
    return {key: value for key, value in out.items() if not field_is_zero(value)}


def roots_product(x, y):
    """The product of two sums of roots (i^p sigma_S keyed (S, p))."""
    out = {}
    for (s, p), c in x.items():
        for (t, q), d in y.items():
            value = c * d * (-1 if p and q else 1)
            for k, label in enumerate(tetrad_order):
                if ((s & t) >> k) & 1:
                    value = value * field_into(tetrad_squares[label])
            out[s ^ t, p ^ q] = out[s ^ t, p ^ q] + value if (s ^ t, p ^ q) in out else value
    return out


def roots_sum(*terms):
    """sum of coefficient * element over (coefficient, element) pairs."""
    out = {}
    for coefficient, x in terms:
        for key, value in x.items():
            out[key] = out[key] + value * coefficient if key in out else value * coefficient
    return out


def tetrad_contraction(labels):
    """C(w_a, w_b, w_c, w_d) for the unnormalised vectors named by labels."""
    total = sp.S.Zero
    for choice in itertools.product(*([(i, v) for i, v in tetrad_unnormalised[k].items() if v != 0] for k in labels)):
        value = weyl_lowered(*(i for i, _ in choice))
        if value != 0:
            total += value * sp.Mul(*(v for _, v in choice))
    return total


def weyl_scalar_parts(name):
    """Psi = C(v1, v2, v3, v4) for the built tetrad, as a sum of roots: each e_k = w_k sigma_k / |N_k|."""
    total = {}
    for choice in itertools.product(*(tetrad_pairs[s] for s in WEYL_SCALAR_SLOTS[name])):
        labels = [k for k, _ in choice]
        value = tetrad_contraction(labels)
        if value == 0:
            continue
        coefficient = sp.Mul(*(c for _, c in choice)) / 4
        value = field_into(value)
        mask = 0
        for k in set(labels):
            value = value / field_into(tetrad_squares[k])
            if labels.count(k) % 2:
                mask |= 1 << tetrad_order.index(k)
        for p, part in ((0, sp.re(coefficient)), (1, sp.im(coefficient))):
            if part != 0:
                total[mask, p] = total[mask, p] + value * part if (mask, p) in total else value * part
    return reduce_roots(total)


def parts_from_record(recorded):
    """The recorded parts [{"roots": [...], "imaginary": bool, "coefficient": ...}] keyed (S, p)."""
    return {(root_mask(part["roots"]), int(part["imaginary"])): field_into(part["coefficient"]) for part in recorded}


def roots_expression(x, roots):
    """The sum of roots as one expression, with sigma_k = roots[k]."""
    total = sp.S.Zero
    for (s, p), c in x.items():
        term = field_out(c) * (sp.I if p else 1)
        for k, label in enumerate(tetrad_order):
            if (s >> k) & 1:
                term = term * expression(roots[label])
        total += term
    return total


def check_parts(step, recorded, recomputed, what):
    """The recorded parts of a sum of roots against those recomputed here, coefficient by coefficient."""
    for key in sorted(set(recorded) | set(recomputed)):
        if key not in recorded or key not in recomputed or not same_value(recorded[key], recomputed[key]):
            raise AssertionError(f"step {step}, {what}, part {key}: the recorded value differs from the value "
                                 "recomputed here")


def weyl_invariants(psi):
    """I = Psi0 Psi4 - 4 Psi1 Psi3 + 3 Psi2^2 and J = det[[Psi4, Psi3, Psi2], [Psi3, Psi2, Psi1], [Psi2, Psi1, Psi0]]."""
    p = [psi[f"Psi{k}"] for k in range(5)]
    mul = roots_product
    invariant_i = roots_sum((1, mul(p[0], p[4])), (-4, mul(p[1], p[3])), (3, mul(p[2], p[2])))
    invariant_j = roots_sum((1, mul(p[4], roots_sum((1, mul(p[2], p[0])), (-1, mul(p[1], p[1]))))),
                            (-1, mul(p[3], roots_sum((1, mul(p[3], p[0])), (-1, mul(p[1], p[2]))))),
                            (1, mul(p[2], roots_sum((1, mul(p[3], p[1])), (-1, mul(p[2], p[2]))))))
    return reduce_roots(invariant_i), reduce_roots(invariant_j)


def hessian_of_quartic(psi):
    """h_0 ... h_4: the Hessian f_xx f_yy - f_xy^2 of f = sum_k binomial(4, k) Psi_k x^k y^(4-k), over 144."""
    p = [psi[f"Psi{k}"] for k in range(5)]
    mul = roots_product
    return [reduce_roots(roots_sum((1, mul(p[0], p[2])), (-1, mul(p[1], p[1])))),
            reduce_roots(roots_sum((2, mul(p[0], p[3])), (-2, mul(p[1], p[2])))),
            reduce_roots(roots_sum((1, mul(p[0], p[4])), (2, mul(p[1], p[3])), (-3, mul(p[2], p[2])))),
            reduce_roots(roots_sum((2, mul(p[1], p[4])), (-2, mul(p[2], p[3])))),
            reduce_roots(roots_sum((1, mul(p[2], p[4])), (-1, mul(p[3], p[3]))))]


def petrov_elements(psi, invariant_i, invariant_j, hessian, name):
    """The element a recorded decision names: Psi0..Psi4, h0..h4, "hi fj - hj fi", I, J, "I^3 - 27 J^2"."""
    binomial = [1, 4, 6, 4, 1]
    if name in psi:
        return psi[name]
    if name in ("I", "J"):
        return invariant_i if name == "I" else invariant_j
    if name == "I^3 - 27 J^2":
        cube = roots_product(roots_product(invariant_i, invariant_i), invariant_i)
        return reduce_roots(roots_sum((1, cube), (-27, roots_product(invariant_j, invariant_j))))
    if name in [f"h{k}" for k in range(5)]:
        return hessian[int(name[1])]
    for i in range(5):
        for j in range(5):
            if name == f"h{i} f{j} - h{j} f{i}":
                return reduce_roots(roots_sum((binomial[j], roots_product(hessian[i], psi[f"Psi{j}"])),
                                              (-binomial[i], roots_product(hessian[j], psi[f"Psi{i}"]))))
    raise AssertionError(f"no element named {name}")


def value_at(x, point):
    """A sum of roots at a recorded point (each sigma_k as the positive root there), to 30 digits."""
    total = sp.S.Zero
    for (s, p), c in x.items():
        term = at_point(field_out(c), point) * (sp.I if p else 1)
        for k, label in enumerate(tetrad_order):
            if (s >> k) & 1:
                term = term * sp.sqrt(at_point(tetrad_squares[label], point))
        total += term
    return sp.N(total, 30)


def value_at_petrov_point(x):
    """A sum of roots at the exact point (each sigma_k the principal square root of |N_k| there), to 50 digits,
    as (real, imaginary), each rounded to zero below 10**-40 of the size of the terms."""
    total, scale = sp.S.Zero, sp.S.One
    for (s, p), c in x.items():
        term = field_out(c) * (sp.I if p else 1)
        for k, label in enumerate(tetrad_order):
            if (s >> k) & 1:
                term = term * sp.sqrt(field_into(tetrad_squares[label]))
        term = sp.N(term, 50)
        scale = max(scale, abs(term))
        total += term
    re, im = complex_number(total)
    small = scale * sp.Float("1e-40", 50)
    return (0 if abs(re) <= small else re), (0 if abs(im) <= small else im)


def check_decision(step, decision, element_named):
    """A recorded zero/non-zero decision, tested again: a proven zero must vanish part by part here; a
    proven non-zero must have a non-zero part (one part) or be non-zero at the recorded point."""
    test = decision["test"]
    names = [decision["decided_by"]] if decision["decided_by"] else None
    if decision["vanishes"] is True:
        for name in decision["elements"]:
            if element_named(name):
                raise AssertionError(f"step {step}: {name} was recorded as zero, but does not vanish here")
        return True
    if decision["vanishes"] is None:
        print(f"{step}: {decision['question']} was seen only at sample points ({decision['decided_by']}): evidence")
        return None
    x = element_named(names[0])
    if petrov_mode == "point" and test["how"] == "point":
        if not x or value_at_petrov_point(x) == (0, 0):
            raise AssertionError(f"step {step}: {names[0]} vanishes at the helpers' exact point")
    elif test["how"] == "canonical form":
        if len(x) != 1:
            raise AssertionError(f"step {step}: {names[0]} was recorded as one non-zero part, here {len(x)}")
    elif test["how"] == "point":
        if abs(complex(value_at(x, test["point"]))) < 1e-20:
            raise AssertionError(f"step {step}: {names[0]} vanishes at the recorded point")
    else:
        raise AssertionError(f"step {step}: an unknown test {test['how']}")
    return False


def check_weyl_scalars(step, parts_recorded, recorded, roots):
    """Every Weyl scalar recomputed part by part and compared; the recorded expressions must be the sums."""
    point_mode_note(step)
    values = {}
    for name in WEYL_SCALAR_SLOTS:
        parts = weyl_scalar_parts(name)
        check_parts(step, parts_from_record(parts_recorded[name]), parts, name)
        if petrov_mode == "point":  # the recorded expression is the sum of its parts: both at the point
            if not numbers_agree(number_at_petrov_point(recorded[name]),
                                 number_at_petrov_point(roots_expression(parts, roots))):
                raise AssertionError(f"step {step}, {name}: the recorded expression is not the sum of its parts "
                                     "at the helpers' exact point")
        else:
            check(step, recorded[name], roots_expression(parts, roots), part=name)
        values[name] = parts
    return values


def check_algebraic_type(step, type_recorded, invariants_recorded, decisions_recorded, psi):
    """I and J recomputed and compared part by part, each decision tested again, and the type read from them."""
    point_mode_note(step)
    invariant_i, invariant_j = weyl_invariants(psi)
    check_parts(step, parts_from_record(invariants_recorded["I"]), invariant_i, "I")
    check_parts(step, parts_from_record(invariants_recorded["J"]), invariant_j, "J")
    hessian = hessian_of_quartic(psi)
    answers = [check_decision(step, decision,
                              lambda name: petrov_elements(psi, invariant_i, invariant_j, hessian, name))
               for decision in decisions_recorded]
    if type_recorded is not None and petrov_type(answers) != type_recorded:
        raise AssertionError(f"step {step}: the decisions give type {petrov_type(answers)}, recorded {type_recorded}")
    print(f"{step}: type {type_recorded}, as recorded")


def check_weyl_scalars_given(step, recorded, vectors):
    """The Weyl scalars for a tetrad of the metric file ({"l": {coordinate: component}, ..., "mbar": ...}),
    contracted here with plain sympy and compared with the recorded ones."""
    values = {}
    which = {"l": "l", "n": "n", "m": "m", "b": "mbar"}
    for name, slots in WEYL_SCALAR_SLOTS.items():
        v = [{i: expression(x) for i, x in vectors[which[slot]].items()} for slot in slots]
        total = sp.S.Zero
        for a, b, c, d in itertools.product(*(list(u) for u in v)):
            value = weyl_lowered(a, b, c, d)
            if value != 0:
                total += value * v[0][a] * v[1][b] * v[2][c] * v[3][d]
        check(step, recorded[name], total, part=name)
        values[name] = expression(recorded[name])
    return values


def petrov_expression(psi, name):
    """The element a recorded decision names, as one expression of the Weyl scalars psi."""
    p = [expression(psi[f"Psi{k}"]) for k in range(5)]
    binomial = [1, 4, 6, 4, 1]
    hessian = [p[0] * p[2] - p[1] ** 2, 2 * (p[0] * p[3] - p[1] * p[2]), p[0] * p[4] + 2 * p[1] * p[3] - 3 * p[2] ** 2,
               2 * (p[1] * p[4] - p[2] * p[3]), p[2] * p[4] - p[3] ** 2]
    invariant_i = p[0] * p[4] - 4 * p[1] * p[3] + 3 * p[2] ** 2
    invariant_j = sp.Matrix([[p[4], p[3], p[2]], [p[3], p[2], p[1]], [p[2], p[1], p[0]]]).det()
    if name in psi:
        return expression(psi[name])
    named = {"I": invariant_i, "J": invariant_j, "I^3 - 27 J^2": invariant_i ** 3 - 27 * invariant_j ** 2}
    named.update({f"h{k}": h for k, h in enumerate(hessian)})
    named.update({f"h{i} f{j} - h{j} f{i}": binomial[j] * hessian[i] * p[j] - binomial[i] * hessian[j] * p[i]
                  for i in range(5) for j in range(5)})
    return named[name]


def check_algebraic_type_given(step, type_recorded, invariants_recorded, decisions_recorded, psi):
    """For a tetrad of the metric file: I and J and every decision recomputed from the Weyl scalars as
    expressions (roots as new symbols with g**2 = b in the zero test), and the type read from them."""
    check(step, invariants_recorded["I"], petrov_expression(psi, "I"), part="I")
    check(step, invariants_recorded["J"], petrov_expression(psi, "J"), part="J")
    answers = []
    for decision in decisions_recorded:
        test = decision["test"]
        if decision["vanishes"] is True:
            for name in decision["elements"]:
                if not vanishes(sp.expand(petrov_expression(psi, name))):
                    raise AssertionError(f"step {step}: {name} was recorded as zero, but does not vanish here")
            answers.append(True)
        elif decision["vanishes"] is None:
            print(f"{step}: {decision['question']} was seen only at sample points: evidence")
            answers.append(None)
        else:
            value = petrov_expression(psi, decision["decided_by"])
            if test["how"] == "point":
                if abs(complex(sp.N(at_point(value, test["point"]), 30))) < 1e-20:
                    raise AssertionError(f"step {step}: {decision['decided_by']} vanishes at the recorded point")
            elif vanishes(value):
                raise AssertionError(f"step {step}: {decision['decided_by']} was recorded as non-zero, but vanishes")
            answers.append(False)
    if type_recorded is not None and petrov_type(answers) != type_recorded:
        raise AssertionError(f"step {step}: the decisions give type {petrov_type(answers)}, recorded {type_recorded}")
    print(f"{step}: type {type_recorded}, as recorded")


def petrov_type(answers):
    """The type from the answers (True: vanishes) to: every Psi, H, H - c f, I and J, I^3 - 27 J^2."""
    for answer, kind in zip(answers, ("O", "N", "D", "III")):
        if answer is not False:
            return kind
    return "II" if answers[4] is not False else "I"
# ---- to here ----
