"""The notebook's helpers for an ansatz: field equations, factors that cannot vanish, the Bianchi
dependence of the equations, solutions of the ordinary differential equations, rescalings.

Inlined into derivation.ipynb (the part between the marker lines) when the derivation has [ansatz];
importable here for unit tests, with the core helpers and the names the notebook defines first.
"""

import sympy as sp  # noqa: F401

from stepper.runtime.core import *  # noqa: F401,F403  (the notebook defines these before this part)

# Defined by the notebook's cells before these helpers run (a test sets them).
ansatz_unknowns: list = []
ansatz_constant = sp.S.Zero
metric_determinant = sp.S.One

# ---- inlined into the notebook from here ----
# ---------------------------------------------------------------------------
# Ansatz: the field equations for unknown functions, their dependence, their solution
# ---------------------------------------------------------------------------

def field_equation(i, j):
    """E_ij = G_ij + Lambda g_ij from the recorded Einstein tensor and metric (Lambda of the ansatz)."""
    return component(einstein, i, j) + ansatz_constant * component(metric, i, j)


def involves_unknowns(expr):
    """Whether expr contains one of the unknown functions (or a derivative of one)."""
    heads = {unknown.func for unknown in ansatz_unknowns}
    return any(f.func in heads for f in expression(expr).atoms(sp.core.function.AppliedUndef))


def cannot_vanish(factor):
    """Whether a factor that involves the unknowns cannot vanish: an unknown function that divides the
    numerator or denominator of the recorded determinant or, for a diagonal metric, of a diagonal component
    (the metric is non-degenerate and finite), or an exponential (of a real quantity)."""
    if isinstance(factor, sp.exp) or (factor.is_Pow and isinstance(factor.base, sp.exp)):
        return True
    diagonal = all(vanishes(component(metric, i, j)) for i, j in index_pairs(strict=True))
    sources = [metric_determinant] + ([component(metric, x, x) for x in index_names] if diagonal else [])
    divisors = [f for source in sources if not vanishes(source)
                for part in sp.fraction(sp.together(source)) for f, _ in sp.factor_list(part)[1]]
    return factor in ansatz_unknowns and factor in divisors


def check_nonzero_multiple(step, recorded, recomputed, part):
    """recorded must be recomputed divided by a factor that cannot vanish: a product of factors free of the
    unknowns (not identically zero), of unknowns that divide the determinant, and of exponentials."""
    where = f"step {step}, {part}"
    if vanishes(recorded):
        raise AssertionError(f"{where}: the recorded equation is identically zero")
    ratio = sp.factor(sp.cancel(sp.together(expression(recomputed) / recorded)))
    numerator, denominator = sp.fraction(ratio)
    if vanishes(numerator):
        raise AssertionError(f"{where}: the recomputed expression is zero, the recorded equation is not")
    for side in (numerator, denominator):
        for factor, _ in sp.factor_list(side)[1]:
            if involves_unknowns(factor) and not cannot_vanish(factor):
                raise AssertionError(f"{where}: the recorded equation is not the recomputed one up to a factor "
                                     f"that cannot vanish (the ratio has the factor {factor})")


def check_ansatz_equations(step, recorded, zero):
    """Each listed equation against the numerator of E_ij recomputed here; each duplicate against its
    representative; each identically vanishing component; and every component accounted for once."""
    for key, equation in recorded.items():
        check_nonzero_multiple(step, equation, sp.numer(sp.together(field_equation(*key))), part=f"E_{key}")
    for key, (representative, factor) in ansatz_duplicates.items():
        if vanishes(factor) or any(involves_unknowns(f) and not cannot_vanish(f)
                                   for part in sp.fraction(sp.factor(expression(factor)))
                                   for f, _ in sp.factor_list(part)[1]):
            raise AssertionError(f"step {step}: the factor of E_{key} must be a product of factors that cannot "
                                 "vanish")
        check(step, factor * field_equation(*representative), field_equation(*key), part=f"E_{key} as a duplicate")
    for key in zero:
        check(step, 0, field_equation(*key), part=f"E_{key}")
    listed = list(recorded) + list(ansatz_duplicates) + list(zero)
    if sorted(listed) != sorted(index_pairs()):
        raise AssertionError(f"step {step}: the components accounted for are {sorted(listed)}")


def check_same_solution(step, recorded_solution):
    """The solution recorded with the metric is the one the solving steps recorded."""
    if set(recorded_solution) != set(ansatz_solution):
        raise AssertionError(f"step {step}: solved for {list(recorded_solution)}, the steps above for {list(ansatz_solution)}")
    for unknown, value in recorded_solution.items():
        check(step, value, ansatz_solution[unknown], part=str(unknown))


def ordered_key(i, j):
    """The index pair in coordinate order, as the recorded equations are keyed."""
    return (i, j) if index_names.index(i) <= index_names.index(j) else (j, i)


def bianchi_coefficients(b):
    """Component b of the contracted Bianchi identity with each listed equation E_ij replaced by an
    undetermined function of all coordinates (each duplicate by its factor times its representative, every
    other component by zero): {key: (coefficient of E_key, [coefficients of its derivatives])}."""
    unknown_equations = {key: sp.Function("E_" + "_".join(key))(*coordinates) for key in ansatz_equations}

    def placeholder(i, j):
        key = ordered_key(i, j)
        if key in unknown_equations:
            return unknown_equations[key]
        if key in ansatz_duplicates:
            representative, factor = ansatz_duplicates[key]
            return factor * unknown_equations[representative]
        return sp.S.Zero

    relation = sp.expand(divergence(placeholder, b))
    derivatives = {d: sp.Dummy("dE") for d in sorted(relation.atoms(sp.Derivative), key=sp.default_sort_key)}
    values = {key: sp.Dummy("E") for key in unknown_equations}
    plain = relation.xreplace(derivatives).xreplace({unknown_equations[key]: values[key] for key in values})
    return {key: (sp.diff(plain, values[key]),
                  [sp.diff(plain, fresh) for d, fresh in derivatives.items() if d.expr == unknown_equations[key]])
            for key in unknown_equations}


def check_dependence(step, independent, follows, relations):
    """Recompute which equations enter each component of the identity, and that each equation recorded as
    following from the others enters its component undifferentiated with the recorded coefficient."""
    for b in index_names:
        coefficients = bianchi_coefficients(b)
        present = {key for key, (value, derivatives) in coefficients.items()
                   if not vanishes(value) or not all(vanishes(d) for d in derivatives)}
        if present != set(relations[b]):
            raise AssertionError(f"step {step}: component {b} of the identity involves {sorted(present)}, "
                                 f"recorded {sorted(relations[b])}")
        for key, (source, component_name, coefficient) in follows.items():
            if component_name != b:
                continue
            value, derivatives = coefficients[key]
            check(step, coefficient, value, part=f"coefficient of E_{key} in component {b}")
            factors = sp.factor_list(sp.numer(sp.together(coefficient)))[1]
            if vanishes(coefficient) or any(involves_unknowns(f) and not cannot_vanish(f) for f, _ in factors):
                raise AssertionError(f"step {step}: the coefficient of E_{key} in component {b} may vanish, so "
                                     f"E_{key} does not follow where it does")
            if not all(vanishes(d) for d in derivatives):
                raise AssertionError(f"step {step}: E_{key} is differentiated in component {b} of the identity")
            if set(source) != present - {key} or not set(source) <= set(independent):
                raise AssertionError(f"step {step}: E_{key} does not follow from the equations recorded")
    expected = [key for key in ansatz_equations if key not in follows]
    if list(independent) != expected:
        raise AssertionError(f"step {step}: the independent equations are {expected}, recorded {list(independent)}")


def check_ode_solution(step, key, recorded, other_branches):
    """The equation solved is the reduced E_key with the earlier solutions put in (up to a factor that
    cannot vanish), it holds one unsolved unknown, and each recorded solution satisfies it."""
    expected = ansatz_equations[key]
    if ansatz_solution:
        expected = sp.numer(sp.together(expected.subs(ansatz_solution).doit()))
    check_nonzero_multiple(step, recorded["equation"], expected, part="the equation")
    unknown = recorded["unknown"]
    left = [f for f in ansatz_unknowns if f not in ansatz_solution and recorded["equation"].has(f)]
    if left != [unknown]:
        raise AssertionError(f"step {step}: the equation involves the unsolved unknowns {left}, not {unknown} alone")
    for number, solution in enumerate([recorded["solution"]] + list(other_branches)):
        if not vanishes(recorded["equation"].subs(unknown, solution).doit()):
            which = "the solution" if number == 0 else f"branch {number + 1}"
            raise AssertionError(f"step {step}: {which} does not satisfy the equation")


def check_rescaling(step, constant, name):
    """constant appears in g_(name name) alone, as a factor that is a function of it alone, and no component
    depends on the coordinate name: rescaling that coordinate removes it."""
    holders = [(i, j) for i, j in index_pairs() if component(ansatz_metric, i, j).has(constant)]
    if holders != [(name, name)] or any(expression(value).has(coordinate[name]) for value in ansatz_metric.values()):
        raise AssertionError(f"step {step}: {constant} cannot be removed by rescaling {name}")
    _, rest = sp.factor(component(ansatz_metric, name, name)).as_independent(constant, as_Add=False)
    if rest.free_symbols != {constant}:
        raise AssertionError(f"step {step}: g_{name},{name} is not a function of {constant} alone times a factor free of it")


def christoffel_from_scratch(matrix):
    """(g^ij, Gamma^a_bc) of a metric matrix from nothing recorded:
    Gamma^a_bc = 1/2 g^ad (d_b g_dc + d_c g_db - d_d g_bc), as nested lists gamma[a][b][c]."""
    n = dimension
    inverse = matrix.inv().applyfunc(sp.cancel)
    dg = [matrix.diff(coordinates[k]) for k in range(n)]
    gamma = [[[sp.cancel(sum((inverse[a, d] * (dg[b][d, c] + dg[c][d, b] - dg[d][b, c]) for d in range(n)), sp.S.Zero) / 2)
               for c in range(n)] for b in range(n)] for a in range(n)]
    return inverse, gamma


def einstein_from_scratch(matrix):
    """G_ij of a metric matrix computed from nothing recorded: its inverse, Christoffel symbols
    Gamma^a_bc = 1/2 g^ad (d_b g_dc + d_c g_db - d_d g_bc), the Ricci tensor
    R_bd = d_a Gamma^a_db - d_d Gamma^a_ab + Gamma^a_ae Gamma^e_db - Gamma^a_de Gamma^e_ab, and
    G_bd = R_bd - R g_bd / 2."""
    n = dimension
    inverse, gamma = christoffel_from_scratch(matrix)
    x = coordinates
    ricci_matrix = sp.zeros(n, n)
    for b in range(n):
        for d in range(b, n):
            value = sum((sp.diff(gamma[a][d][b], x[a]) - sp.diff(gamma[a][a][b], x[d]) for a in range(n)), sp.S.Zero)
            for a in range(n):
                for e in range(n):
                    value += gamma[a][a][e] * gamma[e][d][b] - gamma[a][d][e] * gamma[e][a][b]
            ricci_matrix[b, d] = ricci_matrix[d, b] = sp.cancel(value)
    scalar = sp.cancel(sum((inverse[b, d] * ricci_matrix[b, d] for b in range(n) for d in range(n)), sp.S.Zero))
    return (ricci_matrix - scalar * matrix / 2).applyfunc(sp.cancel)


def invariants_from_scratch(matrix):
    """(R_ij, R, K) of a metric matrix computed from nothing recorded: Christoffel symbols, the Riemann tensor
    R^a_bcd = d_c Gamma^a_db - d_d Gamma^a_cb + Gamma^a_ce Gamma^e_db - Gamma^a_de Gamma^e_cb, R_bd = R^a_bad,
    R = g^bd R_bd and K = R_abcd R^abcd."""
    n = dimension
    inverse, gamma = christoffel_from_scratch(matrix)
    x = coordinates
    up = {}
    for a in range(n):
        for b in range(n):
            for c in range(n):
                for d in range(n):
                    value = sp.diff(gamma[a][d][b], x[c]) - sp.diff(gamma[a][c][b], x[d])
                    value += sum((gamma[a][c][e] * gamma[e][d][b] - gamma[a][d][e] * gamma[e][c][b] for e in range(n)),
                                 sp.S.Zero)
                    up[a, b, c, d] = sp.cancel(value)
    ricci_matrix = sp.Matrix(n, n, lambda b, d: sp.cancel(sum((up[a, b, a, d] for a in range(n)), sp.S.Zero)))
    scalar = sp.cancel(sum((inverse[b, d] * ricci_matrix[b, d] for b in range(n) for d in range(n)), sp.S.Zero))
    down = {key: sum((matrix[key[0], e] * up[(e,) + key[1:]] for e in range(n)), sp.S.Zero) for key in up}
    raised = {key: sum((inverse[key[1], f] * inverse[key[2], g] * inverse[key[3], h] * up[(key[0], f, g, h)]
                        for f in range(n) for g in range(n) for h in range(n)
                        if inverse[key[1], f] != 0 and inverse[key[2], g] != 0 and inverse[key[3], h] != 0), sp.S.Zero)
              for key in up}
    kretschmann = sp.cancel(sum((down[key] * raised[key] for key in up), sp.S.Zero))
    return ricci_matrix, scalar, kretschmann


def check_solved_ricci(step, constant, ricci_matrix):
    """check() R_ij = constant * g_ij for the solved metric, component by component."""
    for i, j in index_pairs():
        check(step, constant * component(ansatz_metric, i, j), ricci_matrix[index_names.index(i), index_names.index(j)],
              f"R_{i},{j} = lambda g_{i},{j}")


# The recorded ansatz quantities, filled in by the step cells below.
ansatz_equations, ansatz_duplicates, ansatz_solution, ansatz_metric = {}, {}, {}, {}
# ---- to here ----
