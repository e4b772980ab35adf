"""The notebook's core helpers: component tables, exact zero tests, the curvature chain recomputed
from recorded values, verdict checks.

stepper inlines the part of this file between the two marker lines into the setup cell of every
derivation.ipynb, after the cell has defined the coordinates; the notebook then needs nothing but sympy.
Here it is an ordinary module, so that the helpers can be imported and unit-tested: the names the
notebook's setup cell defines first are given neutral values below, and a test sets them.
"""

import itertools

import sympy as sp

# Defined by the notebook's setup cell before the helpers (a test sets them).
coordinates: list = []
index_names: list = []
coordinate: dict = {}
dimension = 0
scalar_curvature = sp.S.Zero

# ---- inlined into the notebook from here ----
def expression(value):
    """value as a sympy object: the notebook passes expressions stepper printed as code, never text, and
    strict sympify refuses text rather than parse it."""
    return sp.sympify(value, strict=True)


def component(table, *indices):
    """A recorded tensor component, as a sympy object; components that were not recorded are zero."""
    return expression(table.get(indices, sp.S.Zero))


def index_pairs(strict=False):
    """(i, j) with i <= j (i < j when strict) in the coordinate order."""
    return [(i, j) for position, i in enumerate(index_names)
            for j in index_names[position + 1 if strict else position:]]


def every_index(rank):
    """Every tuple of `rank` index names."""
    return list(itertools.product(index_names, repeat=rank))


def riemann_index_sets():
    """(a, b, c, d) with a < b, c < d and (a, b) <= (c, d): the independent components of R_abcd."""
    pairs = index_pairs(strict=True)
    return [first + second for position, first in enumerate(pairs) for second in pairs[position:]]


def metric_from_line_element(line_element, differentials):
    """g_ij from ds^2 = g_ij dx^i dx^j, summed over all i and j: the coefficient of (dx^i)^2 on the diagonal,
    half the coefficient of dx^i dx^j (i != j) off it.  Every term must be quadratic in the differentials."""
    g = sp.zeros(dimension, dimension)
    for powers, coefficient in sp.Poly(sp.expand(line_element), *differentials).terms():
        indices = [k for k, power in enumerate(powers) for _ in range(power)]
        if len(indices) != 2:
            raise AssertionError("step metric: a term of the line element is not quadratic in the differentials")
        i, j = indices
        if i == j:
            g[i, i] += coefficient
        else:
            g[i, j] += coefficient / 2
            g[j, i] += coefficient / 2
    return g


def metric_matrix():
    """The recorded metric as a sympy Matrix."""
    return sp.Matrix(dimension, dimension,
                     lambda row, column: component(metric, index_names[row], index_names[column]))


def fill_lowered(table, recorded):
    """Store each recorded R_abcd under every index order R_abcd = -R_bacd = -R_abdc = R_cdab gives."""
    for (a, b, c, d), value in recorded.items():
        for (p, q, r, s) in ((a, b, c, d), (c, d, a, b)):
            table[p, q, r, s] = table[q, p, s, r] = value
            table[q, p, r, s] = table[p, q, s, r] = -value


# ---------------------------------------------------------------------------
# Deciding whether an expression is zero
# ---------------------------------------------------------------------------

trigonometric_rewrites = {
    sp.tan: lambda u: sp.sin(u) / sp.cos(u), sp.cot: lambda u: sp.cos(u) / sp.sin(u),
    sp.sec: lambda u: 1 / sp.cos(u), sp.csc: lambda u: 1 / sp.sin(u),
    sp.tanh: lambda u: sp.sinh(u) / sp.cosh(u), sp.coth: lambda u: sp.cosh(u) / sp.sinh(u)}


def opaque_atoms(expr):
    """(expr with roots and other functions replaced by fresh symbols, {root symbol: (base, q)}).

    Every power b**(p/q) with q > 1 becomes g**p for one fresh symbol g per (b, q), which satisfies
    g**q = b whatever branch the root takes (I is the root of -1); every |x| and every function other than sin, cos, sinh,
    cosh of a symbol or a free function becomes a fresh symbol with no relation.  A zero found with
    these symbols (and the relations g**q = b) is a proof; a non-zero is not."""
    for head, rule in trigonometric_rewrites.items():
        if expr.has(head):
            expr = expr.replace(head, rule)
    fresh, roots = {}, {}

    def root(base, q):
        key = ("root", base, q)
        if key not in fresh:
            fresh[key] = sp.Dummy("root")
            roots[fresh[key]] = (base, q)
        return fresh[key]

    def opaque(e):
        if e is sp.I:
            return root(sp.S.NegativeOne, 2)
        if e.is_Atom or isinstance(e, (sp.Derivative, sp.core.function.AppliedUndef)):
            return e
        if isinstance(e, (sp.sin, sp.cos, sp.sinh, sp.cosh)) and e.args[0].is_Symbol:
            return e
        if e.is_Pow and e.exp.is_Rational and not e.exp.is_Integer:
            return root(opaque(e.base), e.exp.q) ** e.exp.p
        if e.is_Add or e.is_Mul or (e.is_Pow and e.exp.is_Integer):
            return e.func(*[opaque(a) for a in e.args])
        if e not in fresh:
            fresh[e] = sp.Dummy("opaque")
        return fresh[e]

    return opaque(expr), roots


def polynomial_quotient(expr, roots=None):
    """expr as numerator / denominator, two polynomials in fresh symbols, if it is a rational function.

    Each sin(x), cos(x) (sinh(x), cosh(x)) of a symbol x becomes a fresh symbol
    s, c, and each free function and each of its derivatives a fresh symbol
    too; so does pi, which is transcendental.  Returns (numerator, denominator,
    relations) with one relation c**2 + s**2 - 1 (c**2 - s**2 - 1 for the
    hyperbolic pair) per pair, all three as elements of one polynomial ring
    with the cosines first in lex order; or None when expr holds anything else
    (exp, sqrt, log, ...).

    roots, from opaque_atoms, adds a relation g**q - b for each root symbol g
    whose base b is a polynomial free of other roots, with the roots first in
    lex order.  The relations' leading terms (g**q, c**2) share no variable, so
    they form a Groebner basis and the remainder of a division by them is unique.
    """
    roots = roots or {}
    for head, rule in trigonometric_rewrites.items():
        if expr.has(head):
            expr = expr.replace(head, rule)
    bases = {g: base for g, (base, _) in roots.items()}
    if expr.has(sp.pi) or any(base.has(sp.pi) for base in bases.values()):
        number = {sp.pi: sp.Dummy("pi", positive=True)}
        expr = expr.xreplace(number)
        bases = {g: base.xreplace(number) for g, base in bases.items()}
    everything = [expr] + list(bases.values())
    fresh, pairs = {}, []
    for cosine, sine, sign in ((sp.cos, sp.sin, 1), (sp.cosh, sp.sinh, -1)):
        for x in sorted({f.args[0] for e in everything for f in e.atoms(cosine, sine)}, key=sp.default_sort_key):
            if not x.is_Symbol:
                return None
            c, s = sp.Dummy("c"), sp.Dummy("s")
            fresh[cosine(x)], fresh[sine(x)] = c, s
            pairs.append((c, s, sign))
    for f in sorted({a for e in everything for a in e.atoms(sp.Derivative, sp.core.function.AppliedUndef)},
                    key=sp.default_sort_key):
        fresh[f] = sp.Dummy("f")
    plain = expr.xreplace(fresh)
    bases = {g: base.xreplace(fresh) for g, base in bases.items()}
    cosines, sines = [c for c, _, _ in pairs], [s for _, s, _ in pairs]
    root_symbols = sorted(roots, key=sp.default_sort_key)
    ordered = set(cosines) | set(sines) | set(root_symbols)
    rest = (plain.free_symbols | {x for base in bases.values() for x in base.free_symbols}) - ordered
    generators = root_symbols + cosines + sines + sorted(rest, key=sp.default_sort_key)
    ring, *variables = sp.ring(generators or [sp.Dummy("x")], sp.QQ, order="lex")
    variable = dict(zip(generators, variables))
    known = {}

    def quotient(e):
        """(numerator, denominator) of e, polynomials built without expanding sympy expressions."""
        if e in known:
            return known[e]
        if e.is_Symbol:
            result = (variable[e], ring.one)
        elif e.is_Rational:
            result = (ring(e.p), ring(e.q))
        elif e.is_Mul:
            numerator, denominator = ring.one, ring.one
            for factor in e.args:
                n, d = quotient(factor)
                numerator, denominator = numerator * n, denominator * d
            result = (numerator, denominator)
        elif e.is_Pow and e.exp.is_Integer:
            n, d = quotient(e.base)
            k = int(e.exp)
            result = (n**k, d**k) if k >= 0 else (d**-k, n**-k)
        elif e.is_Add:
            terms = [quotient(term) for term in e.args]
            common = ring.one
            for _, d in terms:
                if d != common and d != ring.one:  # most terms share one denominator: no gcd for those
                    common = common.lcm(d)
            result = (sum((n if d == common else n * common.exquo(d) for n, d in terms), ring.zero), common)
        else:
            raise ValueError(f"not a rational function: {e}")
        known[e] = result
        return result

    try:
        numerator, denominator = quotient(plain)
    except ValueError:
        return None
    relations = []
    for g in root_symbols:
        try:
            n, d = quotient(bases[g])
        except ValueError:
            continue
        if d == ring.one and not (bases[g].free_symbols & set(root_symbols)):
            relations.append(variable[g] ** roots[g][1] - n)
    relations += [variable[c]**2 + sign * variable[s]**2 - 1 for c, s, sign in pairs]
    return numerator, denominator, relations


def vanishes(expr):
    """Decide exactly whether expr is identically zero.

    For a rational function of the symbols, of sines and cosines (hyperbolic
    sines and cosines) of symbols and of free functions and their derivatives:
    expr is zero exactly when the remainder of its numerator, divided by the
    relations c**2 + s**2 - 1 (c**2 - s**2 - 1), is zero.  The relations'
    leading terms c**2 share no variable, so that remainder is unique.
    Anything else is left to sp.simplify.
    """
    expr = expression(expr)
    if expr == 0:
        return True
    parts = polynomial_quotient(expr)
    if parts is not None:
        numerator, denominator, relations = parts
        if denominator.rem(relations) != 0:
            return numerator.rem(relations) == 0
    if vanishes_with_roots(expr):
        return True
    return sp.simplify(expr) == 0


def vanishes_with_roots(expr):
    """True when expr is zero with every root, |x| and other function treated as a new symbol, and each
    root g of a polynomial b reduced by g**q = b (see opaque_atoms): a proof that it vanishes.  False
    means only that this test did not show it."""
    expr = expression(expr)
    if expr == 0:
        return True
    parts = polynomial_quotient(*opaque_atoms(expr))
    if parts is None:
        return False
    numerator, denominator, relations = parts
    return denominator.rem(relations) != 0 and numerator.rem(relations) == 0


def check(step, recorded, recomputed, part=None):
    """Raise AssertionError naming the step unless recorded == recomputed exactly."""
    if not vanishes(expression(recomputed) - expression(recorded)):
        where = f"step {step}" + (f", {part}" if part else "")
        shown = str(recorded)
        shown = shown if len(shown) <= 200 else shown[:200] + " ..."
        raise AssertionError(f"{where}: the recorded value {shown} differs from the value recomputed here")


def check_table(step, recorded, recompute, keys):
    """check() every component in keys: the recorded one (zero when not listed) against recompute(*key)."""
    for key in keys:
        check(step, component(recorded, *key), recompute(*key), part=f"component {key}")


def check_summary(step, recorded, table, recompute, keys):
    """A summary lists the non-zero components: each listed one must be the value its own step
    recorded, and each of keys not listed must recompute to zero."""
    for key, value in recorded.items():
        check(step, value, component(table, *key), part=f"listed component {key}")
    for key in keys:
        if key not in recorded:
            check(step, 0, recompute(*key), part=f"unlisted component {key}")


def verdict(step, recorded_holds, residues):
    """Check a recorded yes/no answer against residues recomputed here.

    Each residue is zero exactly when the statement holds for that component.
    recorded_holds True: every residue must vanish; False: at least one must
    not; None (undecided when the derivation ran): nothing is asserted.
    """
    if recorded_holds is None:
        print(f"{step}: recorded as undecided, so no residue is asserted here")
        return
    for label, residue in residues.items():
        if not vanishes(residue):
            if recorded_holds:
                raise AssertionError(f"step {step}: recorded as holding, but {label} does not vanish")
            print(f"{step}: does not hold ({label} does not vanish), as recorded")
            return
    if not recorded_holds:
        raise AssertionError(f"step {step}: recorded as not holding, but all {len(residues)} residues vanish")
    print(f"{step}: holds ({len(residues)} residues vanish), as recorded")


# ---------------------------------------------------------------------------
# The general formulas, each evaluated on values recorded by earlier cells
# ---------------------------------------------------------------------------

def christoffel_from_metric(a, b, c):
    """Gamma^a_bc = 1/2 g^ad (d_b g_dc + d_c g_db - d_d g_bc)."""
    return sp.Rational(1, 2) * sum(
        (component(inverse_metric, a, d) * (component(metric_derivatives, b, d, c)
                                            + component(metric_derivatives, c, d, b)
                                            - component(metric_derivatives, d, b, c))
         for d in index_names), sp.S.Zero)


def riemann_from_christoffel(a, b, c, d):
    """R^a_bcd = d_c Gamma^a_db - d_d Gamma^a_cb + Gamma^a_ce Gamma^e_db - Gamma^a_de Gamma^e_cb."""
    value = (sp.diff(component(christoffel, a, d, b), coordinate[c])
             - sp.diff(component(christoffel, a, c, b), coordinate[d]))
    for e in index_names:
        value += component(christoffel, a, c, e) * component(christoffel, e, d, b)
        value -= component(christoffel, a, d, e) * component(christoffel, e, c, b)
    return value


def riemann_group(derivative=None, products=()):
    """One group of the terms of R^a_bcd: d_x Gamma^a_bc for ``derivative`` = (x, a, b, c), or the sum of the
    products Gamma^a_bc Gamma^d_ef over ``products`` = [((a, b, c), (d, e, f)), ...]."""
    if derivative is not None:
        x, a, b, c = derivative
        return sp.diff(component(christoffel, a, b, c), coordinate[x])
    return sum((component(christoffel, *first) * component(christoffel, *second) for first, second in products),
               sp.S.Zero)


def ricci_from_riemann(b, d):
    """R_bd = R^a_bad."""
    return sum((component(riemann, a, b, a, d) for a in index_names), sp.S.Zero)


def ricci_from_trace_identity(i, j):
    """R_ij = d_l Gamma^l_ij - d_i d_j ln sqrt|g| + Gamma^a_ij d_a ln sqrt|g| - Gamma^l_ia Gamma^a_jl."""
    value = sum((sp.diff(component(christoffel, l, i, j), coordinate[l]) for l in index_names), sp.S.Zero)
    value -= sp.diff(log_sqrt_det[i], coordinate[j])
    for a in index_names:
        value += component(christoffel, a, i, j) * log_sqrt_det[a]
        for l in index_names:
            value -= component(christoffel, l, i, a) * component(christoffel, a, j, l)
    return value


def scalar_from_ricci():
    """R = g^ij R_ij."""
    return sum((component(inverse_metric, i, j) * component(ricci, i, j)
                for i in index_names for j in index_names), sp.S.Zero)


def einstein_from_ricci(i, j):
    """G_ij = R_ij - R g_ij / 2."""
    return component(ricci, i, j) - scalar_curvature * component(metric, i, j) / 2


def mixed_from_lowered(table, a, b):
    """X^a_b = g^ac X_cb for a recorded table of X_cb."""
    return sum((component(inverse_metric, a, c) * component(table, c, b) for c in index_names), sp.S.Zero)


def moved_component(source, source_positions, positions, indices):
    """A tensor component in `positions` ("ud": first index up, second down) at the index names `indices`,
    from the same tensor in `source_positions`, given as a function of index names: each index that is down
    there and up here is raised with the recorded g^ab, each the other way lowered with the recorded g_ab."""
    slots = [k for k in range(len(positions)) if source_positions[k] != positions[k]]
    total = sp.S.Zero
    for dummies in itertools.product(index_names, repeat=len(slots)):
        factor, inner = sp.S.One, list(indices)
        for k, e in zip(slots, dummies):
            factor *= component(inverse_metric if positions[k] == "u" else metric, indices[k], e)
            inner[k] = e
        if factor != 0:
            total += factor * source(*inner)
    return total


def lowered_from_riemann(a, b, c, d):
    """R_abcd = g_ae R^e_bcd."""
    return sum((component(metric, a, e) * component(riemann, e, b, c, d) for e in index_names), sp.S.Zero)


def kretschmann_from_lowered():
    """K = R_abcd R^abcd = R^ab_cd R^cd_ab with R^ab_cd = g^ae g^bf R_efcd, summed as
    4 times the sum over a < b and c < d (both pairs are antisymmetric)."""
    pairs = index_pairs(strict=True)
    mixed = {}
    for a, b in pairs:
        for c, d in pairs:
            total = sp.S.Zero
            for e, f in every_index(2):
                factor = component(inverse_metric, a, e) * component(inverse_metric, b, f)
                if factor != 0:
                    total += factor * component(riemann_lowered, e, f, c, d)
            mixed[a, b, c, d] = total
    return 4 * sum((mixed[a, b, c, d] * mixed[c, d, a, b] for a, b in pairs for c, d in pairs), sp.S.Zero)


def weyl_from_lowered(a, b, c, d):
    """C_abcd = R_abcd - (g_ac R_bd - g_ad R_bc - g_bc R_ad + g_bd R_ac)/(n-2)
    + R (g_ac g_bd - g_ad g_bc)/((n-1)(n-2))."""
    g = lambda i, j: component(metric, i, j)
    R = lambda i, j: component(ricci, i, j)
    n = dimension
    return (component(riemann_lowered, a, b, c, d)
            - (g(a, c) * R(b, d) - g(a, d) * R(b, c) - g(b, c) * R(a, d) + g(b, d) * R(a, c)) / (n - 2)
            + scalar_curvature * (g(a, c) * g(b, d) - g(a, d) * g(b, c)) / ((n - 1) * (n - 2)))


def covariant_derivative_of_ricci(c, a, b):
    """nabla_c R_ab = d_c R_ab - Gamma^e_ca R_eb - Gamma^e_cb R_ae."""
    value = sp.diff(component(ricci, a, b), coordinate[c])
    for e in index_names:
        value -= component(christoffel, e, c, a) * component(ricci, e, b)
        value -= component(christoffel, e, c, b) * component(ricci, a, e)
    return value


def cotton_from_ricci(a, b, c):
    """Three dimensions: C_abc = nabla_c P_ab - nabla_b P_ac with P_ab = R_ab - R g_ab / 4, that is
    C_abc = nabla_c R_ab - nabla_b R_ac + (g_ac d_b R - g_ab d_c R) / 4."""
    g = lambda i, j: component(metric, i, j)
    d_scalar = lambda x: sp.diff(scalar_curvature, coordinate[x])
    return (covariant_derivative_of_ricci(c, a, b) - covariant_derivative_of_ricci(b, a, c)
            + (g(a, c) * d_scalar(b) - g(a, b) * d_scalar(c)) / 4)


def cotton_index_sets():
    """(a, b, c) with b < c: the components of C_abc the Cotton step lists (C_acb = -C_abc)."""
    return [(a,) + pair for a in index_names for pair in index_pairs(strict=True)]


def fill_cotton(table, recorded):
    """Store each recorded C_abc (b < c) under both orders of b, c: C_acb = -C_abc."""
    for (a, b, c), value in recorded.items():
        table[a, b, c] = value
        table[a, c, b] = -value


def divergence(tensor, b):
    """nabla^a E_ab = g^ac (d_c E_ab - Gamma^e_ca E_eb - Gamma^e_cb E_ae) for E given as a function of index names."""
    total = sp.S.Zero
    for a in index_names:
        for c in index_names:
            inverse = component(inverse_metric, a, c)
            if inverse == 0:
                continue
            term = sp.diff(tensor(a, b), coordinate[c])
            for e in index_names:
                term -= component(christoffel, e, c, a) * tensor(e, b)
                term -= component(christoffel, e, c, b) * tensor(a, e)
            total += inverse * term
    return total


def divergence_of_einstein(b):
    """nabla^a G_ab = g^ac (d_c G_ab - Gamma^e_ca G_eb - Gamma^e_cb G_ae)."""
    return divergence(lambda i, j: component(einstein, i, j), b)


# The recorded values, filled in by the step cells below (missing components are zero).
metric, metric_derivatives, inverse_metric = {}, {}, {}
christoffel, christoffel_trace, log_sqrt_det = {}, {}, {}
riemann, ricci, ricci_second_route, einstein = {}, {}, {}, {}
riemann_lowered, weyl, ricci_mixed, einstein_mixed = {}, {}, {}, {}
cotton = {}  # C_abc under both orders of b, c
moved_components = {}  # components an audit raised or lowered, keyed (tensor, positions, index names...)
# ---- to here ----
