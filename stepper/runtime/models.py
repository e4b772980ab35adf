"""The notebook's helpers for the matter declared with [matter.model]: its stress-energy recomputed from the
declaration, the field equations G_ab + Lambda g_ab - kappa T_ab, the conservation law nabla_a T^a_b, the
contracted Bianchi identity that ties them, and the solved (textbook) forms.

Inlined into derivation.ipynb (the part between the marker lines) when the derivation has a model; importable
here for unit tests, with the core helpers and the names the notebook defines first.
"""

import sympy as sp  # noqa: F401

from stepper.runtime.core import *  # noqa: F401,F403  (the notebook defines these before this part)

# Defined by the notebook's cells before these helpers run (a test sets them).
kappa = 8 * sp.pi
cosmological_constant = sp.S.Zero
metric_determinant = sp.S.One

# ---- inlined into the notebook from here ----
# ---------------------------------------------------------------------------
# Matter model: T_ab of the declared matter, its field equations, div T = 0
# ---------------------------------------------------------------------------

def model_stress_energy_from_declaration(model, a, b):
    """T_ab of the declared matter, from the recorded metric and inverse metric.

    model is a dict: {"kind": ..., and "density", "pressure", "velocity" (index name -> u^a, or None for the
    observer at rest along model["time"]), "field", "potential", "vector_potential" (index name -> A_a)}."""
    g = lambda i, j: component(metric, i, j)
    ginv = lambda i, j: component(inverse_metric, i, j)
    kind = model["kind"]
    if kind in ("perfect fluid", "dust"):
        rho = expression(model["density"])
        p = expression(model.get("pressure", 0)) if kind == "perfect fluid" else sp.S.Zero
        if model.get("velocity"):
            u = model["velocity"]
            lower = lambda i: sum(g(i, j) * expression(u.get(j, 0)) for j in index_names)
            uu = lower(a) * lower(b)
        else:
            t = model["time"]
            uu = g(a, t) * g(b, t) / (-g(t, t))
        return (rho + p) * uu + p * g(a, b)
    if kind == "scalar field":
        phi, V = expression(model["field"]), expression(model.get("potential", 0))
        d = {i: sp.diff(phi, coordinate[i]) for i in index_names}
        square = sum(ginv(i, j) * d[i] * d[j] for i in index_names for j in index_names)
        return d[a] * d[b] - g(a, b) * (square / 2 + V)
    A = {i: expression(model["vector_potential"].get(i, 0)) for i in index_names}
    F = lambda i, j: sp.diff(A[j], coordinate[i]) - sp.diff(A[i], coordinate[j])
    F_mixed = lambda i, j: sum(F(i, k) * ginv(k, j) for k in index_names)  # F_i^j
    square = sum(F(i, j) * ginv(i, k) * F_mixed(k, j) for i in index_names for j in index_names for k in index_names)
    return (sum(F(a, c) * F_mixed(b, c) for c in index_names) - g(a, b) * square / 4) / (4 * sp.pi)


def model_field_equation(i, j):
    """E_ij = G_ij + Lambda g_ij - kappa T_ij with the recorded Einstein tensor and the model's recorded T."""
    return (component(einstein, i, j) + cosmological_constant * component(metric, i, j)
            - kappa * component(model_stress_energy, i, j))


def model_divergence(b):
    """nabla_a T^a_b = d_a T^a_b + Gamma^a_ac T^c_b - Gamma^c_ab T^a_c for the model's recorded T."""
    mixed = lambda a, c: sum(component(inverse_metric, a, d) * component(model_stress_energy, d, c)
                             for d in index_names)
    total = sum(sp.diff(mixed(a, b), coordinate[a]) for a in index_names)
    total += sum(component(christoffel, a, a, c) * mixed(c, b) for a in index_names for c in index_names)
    total -= sum(component(christoffel, c, a, b) * mixed(a, c) for a in index_names for c in index_names)
    return total


def model_involves(expr, unknowns):
    heads = {f.func for f in unknowns}
    return any(f.func in heads for f in expression(expr).atoms(sp.core.function.AppliedUndef))


def model_cannot_vanish(factor, unknowns):
    """An exponential, or an unknown dividing the recorded determinant or (diagonal metric) a diagonal component."""
    if isinstance(factor, sp.exp) or (factor.is_Pow and isinstance(factor.base, sp.exp)):
        return True
    diagonal = all(vanishes(component(metric, i, j)) for i, j in index_pairs(strict=True))
    sources = [metric_determinant] + ([component(metric, x, x) for x in index_names] if diagonal else [])
    divisors = [f for source in sources if not vanishes(source)
                for part in sp.fraction(sp.together(source)) for f, _ in sp.factor_list(part)[1]]
    return factor in unknowns and factor in divisors


def check_model_multiple(step, recorded, recomputed, unknowns, part):
    """recorded must be recomputed times a factor that cannot vanish (free of the unknowns, an exponential, or an
    unknown that divides the determinant)."""
    where = f"step {step}, {part}"
    if vanishes(recorded):
        raise AssertionError(f"{where}: the recorded equation is identically zero")
    ratio = sp.factor(sp.cancel(sp.together(expression(recomputed) / expression(recorded))))
    if vanishes(sp.numer(ratio)):
        raise AssertionError(f"{where}: the recomputed expression is zero, the recorded one is not")
    for side in sp.fraction(ratio):
        for factor, _ in sp.factor_list(side)[1]:
            if model_involves(factor, unknowns) and not model_cannot_vanish(factor, unknowns):
                raise AssertionError(f"{where}: not the recomputed equation up to a factor that cannot vanish "
                                     f"(the ratio has the factor {factor})")


def check_model_equations(step, recorded, duplicates, zero, unknowns):
    """Each listed equation against E_ij recomputed here; each duplicate against its representative; each
    identically vanishing component; and every component i <= j accounted for once."""
    for key, equation in recorded.items():
        check_model_multiple(step, equation, sp.numer(sp.together(model_field_equation(*key))), unknowns, f"E_{key}")
    for key, (representative, factor) in duplicates.items():
        check(step, expression(factor) * model_field_equation(*representative), model_field_equation(*key),
              part=f"E_{key} as a duplicate")
    for key in zero:
        check(step, 0, model_field_equation(*key), part=f"E_{key}")
    listed = list(recorded) + list(duplicates) + list(zero)
    if sorted(listed) != sorted(index_pairs()):
        raise AssertionError(f"step {step}: the components accounted for are {sorted(listed)}")


def model_identity_coefficients(b, duplicates):
    """Component b of nabla^a E_ab = g^ac (d_c E_ab - Gamma^e_ca E_eb - Gamma^e_cb E_ae) as coefficients:
    (undifferentiated {pair: coefficient}, differentiated {pair: {c: coefficient}}), each duplicate
    E_k = q E_rep written through its representative."""
    pair = lambda i, j: (i, j) if index_names.index(i) <= index_names.index(j) else (j, i)
    alg, der = {}, {}
    for a in index_names:
        for c in index_names:
            inverse = component(inverse_metric, a, c)
            if inverse == 0:
                continue
            der.setdefault(pair(a, b), {})
            der[pair(a, b)][c] = der[pair(a, b)].get(c, 0) + inverse
            for e in index_names:
                alg[pair(e, b)] = alg.get(pair(e, b), 0) - inverse * component(christoffel, e, c, a)
                alg[pair(a, e)] = alg.get(pair(a, e), 0) - inverse * component(christoffel, e, c, b)
    for key, (representative, factor) in duplicates.items():
        factor = expression(factor)
        total = alg.pop(key, 0) * factor
        for c, coefficient in der.pop(key, {}).items():
            total += coefficient * sp.diff(factor, coordinate[c])
            der.setdefault(representative, {})
            der[representative][c] = der[representative].get(c, 0) + coefficient * factor
        alg[representative] = alg.get(representative, 0) + total
    return alg, der


def check_model_conservation(step, recorded, follows, duplicates):
    """Each component of div T against its recomputation; the identity nabla^a E_ab = -kappa nabla_a T^a_b
    for every b; and each equation said to follow: undifferentiated in that component, with the recorded
    coefficient."""
    for b in index_names:
        check(step, recorded.get(b, 0), model_divergence(b), part=f"component {b}")
        identity = divergence(model_field_equation, b) + kappa * model_divergence(b)
        if not vanishes(identity):
            raise AssertionError(f"step {step}: nabla^a E_a{b} + kappa nabla_a T^a_{b} does not vanish")
    for key, (others, b, coefficient) in follows.items():
        alg, der = model_identity_coefficients(b, duplicates)
        if any(not vanishes(v) for v in der.get(key, {}).values()):
            raise AssertionError(f"step {step}: E_{key} enters component {b} differentiated")
        check(step, coefficient, alg.get(key, 0), part=f"coefficient of E_{key} in component {b}")
        present = [k for k in set(alg) | set(der) if k != key and k not in duplicates and k in model_equations
                   and (not vanishes(alg.get(k, 0)) or any(not vanishes(v) for v in der.get(k, {}).values()))]
        if sorted(present) != sorted(others):
            raise AssertionError(f"step {step}: component {b} contains {sorted(present)}, recorded {sorted(others)}")


def model_source(source, indices):
    """The expression a solved equation came from: the field equation E_ij (indices (i, j)) or component b of
    the conservation law (indices (b,))."""
    if source == "conservation":
        return model_divergence(*indices)
    return model_field_equation(*indices)


def check_model_solved(step, equations, definitions):
    """Each solved equation lhs = rhs: its first replacement turns lhs into rhs, and its source (a field equation
    or a component of div T) vanishes once the definitions and every replacement are put in."""
    for equation in equations:
        lhs, rhs = expression(equation["lhs"]), expression(equation["rhs"])
        first_old, first_new = equation["replace"][0]
        check(step, rhs, lhs.subs(first_old, first_new).doit(), part=f"{equation['name']}: lhs")
        value = model_source(equation["source"], equation["component"])
        for old, new in definitions:
            value = value.subs(old, new)
        value = value.doit()
        for old, new in equation["replace"]:
            value = value.subs(old, new).doit()
        if not vanishes(sp.numer(sp.together(value))):
            raise AssertionError(f"step {step}: {equation['name']}: the {equation['source']} {equation['component']} "
                                 "does not vanish with the solution put in")


# The recorded values of the model, filled in by the step cells below.
model_stress_energy, model_equations = {}, {}
model_declaration, model_unknowns, model_duplicates = {}, [], {}
model_definitions, recorded_equations = [], []
# ---- to here ----
