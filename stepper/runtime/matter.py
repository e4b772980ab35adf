"""The notebook's helpers for the matter stage: stress-energy from the Einstein tensor, the orthonormal
frame, frame components, energy conditions, perfect-fluid residues.

Inlined into derivation.ipynb (the part between the marker lines) when the derivation has [matter];
importable here for unit tests, with the core helpers and the names the notebook defines first.
"""

import itertools  # noqa: F401  (used by the inlined helpers)

import sympy as sp  # noqa: F401

from stepper.runtime.core import *  # noqa: F401,F403  (the notebook defines these before this part)

# Defined by the notebook's cells before these helpers run (a test sets them).
kappa = 8 * sp.pi
cosmological_constant = sp.S.Zero
energy_density = sp.S.Zero

# ---- inlined into the notebook from here ----
# ---------------------------------------------------------------------------
# Matter: the stress-energy tensor, the orthonormal frame, the energy conditions
# ---------------------------------------------------------------------------

def stress_energy_from_einstein(i, j):
    """T_ij = (G_ij + Lambda g_ij) / kappa."""
    return (component(einstein, i, j) + cosmological_constant * component(metric, i, j)) / kappa


def mixed_stress_energy_from_lowered(i, j):
    """T^i_j = g^ik T_kj."""
    return sum((component(inverse_metric, i, k) * component(stress_energy, k, j) for k in index_names), sp.S.Zero)


def raised_stress_energy_from_lowered(i, j):
    """T^ij = g^ik g^jl T_kl."""
    return sum((component(inverse_metric, i, k) * component(inverse_metric, j, l) * component(stress_energy, k, l)
                for k in index_names for l in index_names), sp.S.Zero)


def inner_product(u, v):
    """g(u, v) = g_ij u^i v^j for vectors given as {coordinate name: component} (missing components are zero)."""
    return sum((u[i] * component(metric, i, j) * v[j] for i in u for j in v), sp.S.Zero)


def gram_schmidt_frame(time):
    """The unnormalised frame of the observers normal to time = const, built by the recorded convention.

    w_(time)^i = -g^(time i); then each other coordinate direction d_k, in coordinate order, minus its
    components along the spatial vectors already built.  Returns (vectors, squared norms, broken): the
    squared norm of w_(time) is -g^(time time), and broken is the label of the first vector whose squared
    norm vanishes identically (None when the frame exists)."""
    vectors = {time: {i: -component(inverse_metric, time, i) for i in index_names}}
    norms = {time: -component(inverse_metric, time, time)}
    if vanishes(norms[time]):
        return vectors, norms, time
    for k in index_names:
        if k == time:
            continue
        direction = {i: sp.S.One if i == k else sp.S.Zero for i in index_names}
        vector = dict(direction)
        for m in list(vectors)[1:]:
            coefficient = inner_product(direction, vectors[m]) / norms[m]
            vector = {i: sp.cancel(vector[i] - coefficient * vectors[m][i]) for i in index_names}
        norm = sp.cancel(inner_product(vector, vector))
        if vanishes(norm):
            return vectors, norms, k
        vectors[k], norms[k] = vector, norm
    return vectors, norms, None


def region_points(symbols, count, norms=None):
    """Up to `count` exact points where every squared norm of the frame (norms, by default the recorded
    frame_norms) is positive: where the frame exists.

    A symbol with a recorded range [low, high] takes a fraction of its range; any other symbol a small
    number of its declared sign.  The points are the same at every run."""
    norms = frame_norms if norms is None else norms
    fractions = [sp.Rational(p, q) for q in range(2, 9) for p in range(1, q) if sp.gcd(p, q) == 1]
    sizes = [sp.Integer(1), sp.Integer(2), sp.Integer(3), sp.Rational(1, 2), sp.Integer(5), sp.Integer(10),
             sp.Rational(3, 2), sp.Integer(7), sp.Rational(1, 3), sp.Integer(20)]
    names = set(symbols) | {s for norm in norms.values() for s in expression(norm).free_symbols}
    ordered = sorted(names, key=sp.default_sort_key)
    points = []
    for attempt in range(400):
        point = {}
        for position, s in enumerate(ordered):
            if s in frame_region:
                low, high = frame_region[s]
                point[s] = low + (high - low) * fractions[(attempt + 3 * position) % len(fractions)]
            else:
                size = sizes[(attempt + position) % len(sizes)]
                point[s] = -size if s.is_nonpositive else size
        if all(expression(norm).subs(point).is_positive is True for norm in norms.values()):
            points.append(point)
            if len(points) == count:
                break
    return points


def sign_agrees(first, second, point=None):
    """Whether first and second, whose squares agree, have the same sign: True when sympy's assumptions show
    first * second >= 0 (free functions and derivatives taken as real and, where the product is defined,
    non-zero: a frame component such as 1/|a(t)| needs a(t) != 0), or when they have the same sign at
    the exact point (by default frame_point, a point of the region where the frame exists; a root of a
    positive function keeps its sign where the function stays positive); False when the signs differ
    there; None when neither can be told."""
    product = sp.factor(expression(first) * expression(second))
    real = {f: sp.Dummy("f", real=True, nonzero=True)
            for f in sorted(product.atoms(sp.Derivative, sp.core.function.AppliedUndef), key=sp.default_sort_key)}
    if product.subs(real).is_nonnegative is True:
        return True
    point = frame_point if point is None else point
    if point is None:
        return None
    a, b = (sp.N(expression(value).subs(point), 40) for value in (first, second))
    if not (a.is_real and b.is_real):
        return None
    return not (a * b < 0)


def check_with_root(step, recorded, rational, radicand, part):
    """recorded must be rational / sqrt(radicand) with the positive root: recorded**2 * radicand = rational**2
    exactly, and recorded has the sign of rational (sign_agrees)."""
    where = f"step {step}, {part}"
    if not vanishes(sp.expand(expression(recorded) ** 2) * radicand - rational ** 2):
        raise AssertionError(f"{where}: the recorded value {str(recorded)[:200]} differs from the value recomputed here")
    agrees = sign_agrees(recorded, rational)
    if agrees is False:
        raise AssertionError(f"{where}: the recorded value {str(recorded)[:200]} has the wrong sign")
    if agrees is None:
        print(f"{where}: agrees up to its sign, which could not be compared (no point where the frame exists)")


def check_frame(step, time, vectors, norms):
    """Rebuild the frame by Gram-Schmidt and compare it with the recorded one; return a point of the region
    where the frame exists (None if none is found) and the unnormalised vectors w_(a).

    The squared norms N_(a) must be those recomputed.  Each recorded e_(a) must be w_(a) / sqrt(N_(a)):
    e_(a)^i e_(a)^j N_(a) = w_(a)^i w_(a)^j for all i, j (exact), which fixes e_(a) up to its sign, and
    e_(a) must point the way w_(a) does at that point."""
    unnormalised, squared_norms, broken = gram_schmidt_frame(time)
    if broken is not None:
        raise AssertionError(f"step {step}: a frame was recorded, but the squared norm of w_({broken}) vanishes")
    if list(unnormalised) != frame_order or list(vectors) != frame_order or list(norms) != frame_order:
        raise AssertionError(f"step {step}: the frame is recorded in the order {list(vectors)}, "
                             f"built here in the order {list(unnormalised)}")
    for label in frame_order:
        check(step, norms[label], squared_norms[label], part=f"squared norm N_({label})")
    symbols = set().union(*(expression(value).free_symbols for vector in vectors.values() for value in vector.values()))
    point = next(iter(region_points(symbols, 1, norms)), None)
    for label in frame_order:
        e, w = vectors[label], unnormalised[label]
        for i, j in index_pairs():
            check(step, w[i] * w[j], e.get(i, sp.S.Zero) * e.get(j, sp.S.Zero) * norms[label],
                  part=f"e_({label})^{i} e_({label})^{j} N_({label}) = w_({label})^{i} w_({label})^{j}")
        lead = next(i for i in index_names if not vanishes(w[i]))
        agrees = sign_agrees(e.get(lead, sp.S.Zero), w[lead], point)
        if agrees is False:
            raise AssertionError(f"step {step}: e_({label}) points against w_({label})")
        if agrees is None:
            print(f"{step}: no point where the frame exists was found; the direction of e_({label}) is not compared")
    return point, {label: {i: value for i, value in w.items() if value != 0} for label, w in unnormalised.items()}


def check_frame_table(step, recorded, table, keys):
    """Each frame component (zero when not listed) against the recorded tensor `table` put into the frame.

    The frame step showed e_(a) = w_(a) / sqrt(N_(a)), so X = table(e_(a), e_(b), ...) is P / sqrt(N_(a) N_(b) ...)
    with P = table(w_(a), w_(b), ...), a rational function.  Where every frame index appears an even number
    of times the root is rational and X is checked exactly; otherwise by check_with_root."""
    for key in keys:
        value = component(recorded, *key)
        contracted = frame_contraction(lambda *indices: component(table, *indices), key, frame_unnormalised)
        even, odd = sp.S.One, sp.S.One
        for label in sorted(set(key), key=key.index):
            count = key.count(label)
            even *= frame_norms[label] ** (count // 2)
            odd *= frame_norms[label] ** (count % 2)
        if odd == 1:
            check(step, value, contracted / even, part=f"component {key}")
        else:
            check_with_root(step, value, contracted / even, odd, part=f"component {key}")


def check_density_and_pressures(step, recorded):
    """rho = T_(0)(0) and p_(k) = T_(k)(k) from the recorded frame components; diagonal when every T_(a)(b),
    a != b, vanishes."""
    time = frame_order[0]
    check(step, recorded["energy_density"], component(frame_stress_energy, time, time), part="rho")
    if list(recorded["pressures"]) != frame_order[1:]:
        raise AssertionError(f"step {step}: pressures recorded for {list(recorded['pressures'])}")
    for k in frame_order[1:]:
        check(step, recorded["pressures"][k], component(frame_stress_energy, k, k), part=f"p_({k})")
    if recorded["diagonal"] != stress_energy_diagonal_in_frame():
        raise AssertionError(f"step {step}: recorded diagonal = {recorded['diagonal']}, which the frame components contradict")


def stress_energy_diagonal_in_frame():
    """Whether every recorded T_(a)(b) with a != b vanishes."""
    return all(vanishes(component(frame_stress_energy, a, b)) for a, b in frame_pairs() if a != b)


def check_inequality_values(step, name, recorded):
    """The recorded inequalities are those of the condition, in order, with the values recomputed here."""
    recomputed = energy_condition_values(name)
    if [label for label, _ in recomputed] != list(recorded):
        raise AssertionError(f"step {step}: the inequalities are {[label for label, _ in recomputed]}, "
                             f"recorded {list(recorded)}")
    for label, value in recomputed:
        check(step, recorded[label][0], value, part=label)


def frame_pairs():
    """(a, b) with a <= b in the frame's order."""
    return [(a, b) for position, a in enumerate(frame_order) for b in frame_order[position:]]


def frame_riemann_index_sets():
    """(a, b, c, d) with a < b, c < d and (a, b) <= (c, d) in the frame's order."""
    pairs = [(a, b) for position, a in enumerate(frame_order) for b in frame_order[position + 1:]]
    return [first + second for position, first in enumerate(pairs) for second in pairs[position:]]


def frame_contraction(tensor, labels, vectors):
    """tensor(v_(a), v_(b), ...) for frame vectors `vectors` ({label: {coordinate name: component}}) put into a
    tensor given as a function of coordinate index names."""
    total = sp.S.Zero
    for choice in itertools.product(*(list(vectors[label].items()) for label in labels)):
        value = tensor(*(index for index, _ in choice))
        if value != 0:
            for _, vector_component in choice:
                value = value * vector_component
            total += value
    return total


def energy_condition_values(name):
    """The inequalities of one energy condition, as [(label, value that must be >= 0)], from the recorded
    energy density rho and principal pressures p_(k) (the recorded convention)."""
    spatial = frame_order[1:]
    rho = energy_density
    plus = [(f"rho + p_({k})", rho + pressures[k]) for k in spatial]
    if name == "null":
        return plus
    if name == "weak":
        return [("rho", rho)] + plus
    if name == "strong":
        label = "rho + sum p" if dimension == 4 else f"{dimension - 3}*rho + sum p"
        return plus + [(label, (dimension - 3) * rho + sum((pressures[k] for k in spatial), sp.S.Zero))]
    if name == "dominant":
        return [("rho", rho)] + [(f"rho - p_({k})", rho - pressures[k]) for k in spatial] + plus
    raise ValueError(name)


def sign_decides(value, nonnegative, signs=None):
    """Whether sympy's assumptions, from the declared signs alone, show value >= 0 (nonnegative=True) or
    value < 0 (nonnegative=False).  value and kappa * value (kappa > 0) are factored and tried as they are
    and as numerator * denominator (the sign of n/d wherever d != 0), with each free function and each
    derivative taken as a real symbol (a metric is real), carrying the sign ``signs`` gives it
    ({m(v): "nonnegative", Derivative(m(v), v): "positive"}: the declared signs of free functions)."""
    signs = signs or {}
    forms = []
    for form in (sp.factor(value), sp.factor(kappa * value)):
        numerator, denominator = sp.fraction(form)
        forms += [form, numerator * denominator]

    def stand_in(f):
        word = signs.get(f)
        return sp.Dummy("f", real=True, **({word: True} if word else {}))

    for form in forms:
        derivatives = {d: stand_in(d) for d in sorted(form.atoms(sp.Derivative), key=sp.default_sort_key)}
        plain = form.xreplace(derivatives)
        functions = {f: stand_in(f) for f in sorted(plain.atoms(sp.core.function.AppliedUndef), key=sp.default_sort_key)}
        plain = plain.xreplace(functions)
        if (plain.is_nonnegative if nonnegative else plain.is_negative) is True:
            return True
    return False


def recheck_inequality(step, label, value, how, point=None, signs=None):
    """Re-check one recorded answer to value >= 0.

    how is "zero" (identically 0), "signs" (>= 0 by the declared signs), "negative" (< 0 by the declared
    signs), "point" (< 0 at the recorded exact point), "search" (< 0 at some point of the region),
    "sampled" (>= 0 at points of the region: evidence, not proof) or "undecided" (nothing to assert).
    signs: the declared signs of free functions the recorded decision used (see sign_decides)."""
    where = f"step {step}, {label}"
    if how == "zero" and not vanishes(value):
        raise AssertionError(f"{where}: recorded as identically 0, but it is not")
    if how == "signs" and not sign_decides(value, True, signs):
        raise AssertionError(f"{where}: recorded as >= 0 by the declared signs, which sympy does not confirm")
    if how == "negative" and not sign_decides(value, False, signs):
        raise AssertionError(f"{where}: recorded as < 0 by the declared signs, which sympy does not confirm")
    if how == "point":
        here = expression(value).subs(point)
        if here.is_negative is not True:
            raise AssertionError(f"{where}: recorded as negative at {point}, but there it equals {here}")
    if how == "search":
        points = region_points(expression(value).free_symbols, 50)
        if not any(expression(value).subs(here).is_negative for here in points):
            raise AssertionError(f"{where}: recorded as violated, but it is >= 0 at {len(points)} points of the region")
        print(f"{step}: {label} is negative at a point of the region, as recorded")
        return
    if how == "sampled":
        points = region_points(expression(value).free_symbols, 5)
        for here in points:
            if expression(value).subs(here).is_negative:
                raise AssertionError(f"{where}: recorded as >= 0 at the sampled points, but it is negative at {here}")
        print(f"{step}: {label} >= 0 at {len(points)} exact points of the region (evidence, not proof)")
        return
    if how == "undecided":
        print(f"{step}: {label} was recorded as undecided; nothing is asserted")
        return
    print(f"{step}: {label} re-checked ({how})")


def combined_answer(answers):
    """An energy condition holds when every inequality holds; it fails when one fails; otherwise undecided."""
    if any(answer is False for answer in answers):
        return False
    if any(answer is None for answer in answers):
        return None
    return True


def perfect_fluid_frame_residues():
    """The off-diagonal frame components T_(a)(b) and the differences of the principal pressures p_(k) - p_(first)."""
    residues = {f"T_({a})({b})": component(frame_stress_energy, a, b)
                for position, a in enumerate(frame_order) for b in frame_order[position + 1:]}
    first = frame_order[1]
    residues.update({f"p_({k}) - p_({first})": pressures[k] - pressures[first] for k in frame_order[2:]})
    return residues


def perfect_fluid_residues():
    """T_ij - (rho + p) u_i u_j - p g_ij with u_i = g_ij e_(0)^j and the recorded rho and p."""
    u = frame_vectors[frame_order[0]]
    lowered = {i: sum((component(metric, i, j) * u[j] for j in u), sp.S.Zero) for i in index_names}
    p = pressures[frame_order[1]]
    return {f"T_{i},{j} - (rho + p) u_{i} u_{j} - p g_{i},{j}":
            component(stress_energy, i, j) - (energy_density + p) * lowered[i] * lowered[j] - p * component(metric, i, j)
            for i, j in index_pairs()}


# ---------------------------------------------------------------------------
# Frames and null vectors of the metric file's own ([frame]); null directions; null dust
# ---------------------------------------------------------------------------

def conjugate_vector(vector):
    """The complex conjugate of a vector whose components are a + I b with a, b real (I -> -I)."""
    return {i: expression(value).subs(sp.I, -sp.I) for i, value in vector.items()}


def real_and_imaginary(value):
    """(a, b) for a + I b with a, b real."""
    value = expression(value)
    conjugate = value.subs(sp.I, -sp.I)
    return (value + conjugate) / 2, sp.expand((value - conjugate) / (2 * sp.I))


def check_complex(step, recorded, recomputed, part):
    """check() the real and the imaginary parts of a recorded complex value."""
    for word, recorded_part, recomputed_part in zip(("real", "imaginary"), real_and_imaginary(recorded),
                                                    real_and_imaginary(recomputed)):
        check(step, recorded_part, recomputed_part, part=f"{part} ({word} part)")


def raised_vector(covector):
    """e^i = g^ij e_j for a covector given as {coordinate name: component}."""
    return {i: sum((component(inverse_metric, i, j) * covector[j] for j in covector), sp.S.Zero) for i in index_names}


def check_given_vectors(step, given, index, recorded, tetrad):
    """The recorded upper components are the metric file's vectors (raised with g^ij when it gave covectors),
    and a recorded null tetrad is l = (e0 + e1)/sqrt 2, n = (e0 - e1)/sqrt 2, m = (e2 + I e3)/sqrt 2 built
    from the frame in its recorded order."""
    for label, vector in given.items():
        expected = raised_vector(vector) if index == "down" else vector
        for i in index_names:
            check_complex(step, recorded[label].get(i, sp.S.Zero), expected.get(i, sp.S.Zero), f"{label}^{i}")
    if tetrad:
        e = [recorded[label] for label in recorded]
        root = sp.sqrt(2)
        built = {"l": {i: (e[0].get(i, 0) + e[1].get(i, 0)) / root for i in index_names},
                 "n": {i: (e[0].get(i, 0) - e[1].get(i, 0)) / root for i in index_names},
                 "m": {i: (e[2].get(i, 0) + sp.I * e[3].get(i, 0)) / root for i in index_names}}
        for label, vector in built.items():
            for i in index_names:
                check_complex(step, tetrad[label].get(i, sp.S.Zero), vector[i], f"{label}^{i} of the tetrad")


def given_products(vectors, products):
    """g(a, b) minus its required value for each recorded product (mbar the conjugate of m), as residues
    (real and imaginary parts separately)."""
    known = dict(vectors)
    if "m" in known:
        known["mbar"] = conjugate_vector(known["m"])
    residues = {}
    for product in products:
        first, second, value = product["first"], product["second"], product["value"]
        residue = sp.expand(inner_product(known[first], known[second]) - value)
        real, imaginary = real_and_imaginary(residue)
        residues[f"g({first}, {second}) - ({value}), real part"] = real
        residues[f"g({first}, {second}) - ({value}), imaginary part"] = imaginary
    return residues


def check_given_orthonormal_frame(step, vectors, norms, unnormalised):
    """The frame of the metric file used for the matter: each e_(a) is the checked given vector, and
    e_(a) = w_(a) / sqrt(N_(a)) (e^i e^j N = w^i w^j exactly, and e points the way w does at a point of the
    region where every N is positive, or by sympy's assumptions).  Returns that point (None if none)."""
    symbols = set().union(*(expression(value).free_symbols for vector in vectors.values() for value in vector.values()))
    point = next(iter(region_points(symbols, 1, norms)), None)
    for label in frame_order:
        e, w = vectors[label], unnormalised[label]
        for i in index_names:
            check(step, e.get(i, sp.S.Zero), given_frame_vectors[label].get(i, sp.S.Zero), part=f"e_({label})^{i}")
        for i, j in index_pairs():
            check(step, w.get(i, sp.S.Zero) * w.get(j, sp.S.Zero), e.get(i, sp.S.Zero) * e.get(j, sp.S.Zero) * norms[label],
                  part=f"e_({label})^{i} e_({label})^{j} N_({label}) = w_({label})^{i} w_({label})^{j}")
        lead = next(i for i in index_names if not vanishes(w.get(i, sp.S.Zero)))
        agrees = sign_agrees(e.get(lead, sp.S.Zero), w[lead], point)
        if agrees is False:
            raise AssertionError(f"step {step}: e_({label}) points against w_({label})")
        if agrees is None:
            print(f"{step}: the direction of e_({label}) could not be compared (no point of the region found)")
    return point


def null_direction_residues(step, directions):
    """Each recorded null direction: a coordinate vector d_v has lower components g_iv, a gradient du upper
    components g^iu (checked against the recorded ones); the residues are g(k, k)."""
    residues = {}
    for name, entry in directions.items():
        v = entry["coordinate"]
        if entry["source"] == "coordinate vector":
            upper = {i: sp.S.One if i == v else sp.S.Zero for i in index_names}
            lower = {i: component(metric, i, v) for i in index_names}
        else:
            upper = {i: component(inverse_metric, i, v) for i in index_names}
            lower = {i: sp.S.One if i == v else sp.S.Zero for i in index_names}
        for i in index_names:
            check(step, entry["upper"].get(i, sp.S.Zero), upper[i], part=f"{name}^{i}")
            check(step, entry["lower"].get(i, sp.S.Zero), lower[i], part=f"{name}_{i}")
        null_vectors[name] = upper
        residues[f"g({name}, {name})"] = inner_product(upper, upper)
    return residues


def null_vector(name):
    """A null vector of an earlier cell: a direction read off the metric or a given l or n."""
    return null_vectors[name] if name in null_vectors else given_frame_vectors[name]


def null_dust_residues(step, direction, density):
    """T_ij - f k_i k_j for i <= j with k_i = g_ij k^j, after checking f = T_pp / k_p^2 at the first p with
    k_p != 0 (the recorded recipe)."""
    k = null_vector(direction)
    lower = {i: sum((component(metric, i, j) * k.get(j, sp.S.Zero) for j in index_names), sp.S.Zero)
             for i in index_names}
    p = next(i for i in index_names if not vanishes(lower[i]))
    check(step, density, component(stress_energy, p, p) / lower[p] ** 2, part="f = T_pp / k_p^2")
    return {f"T_{i},{j} - f k_{i} k_{j}": component(stress_energy, i, j) - density * lower[i] * lower[j]
            for i, j in index_pairs()}


def along_null_vector(name):
    """T_ij k^i k^j for a recorded null vector k."""
    k = null_vector(name)
    return sum((component(stress_energy, i, j) * k.get(i, sp.S.Zero) * k.get(j, sp.S.Zero)
                for i in index_names for j in index_names), sp.S.Zero)


# The recorded matter quantities, filled in by the step cells below.
stress_energy, stress_energy_mixed, stress_energy_up = {}, {}, {}
frame_vectors, frame_norms, frame_order, frame_region, frame_point, frame_unnormalised = {}, {}, [], {}, None, {}
frame_stress_energy, frame_ricci, frame_riemann, pressures = {}, {}, {}, {}
given_frame_vectors, given_tetrad, null_vectors, null_dust_density = {}, {}, {}, None
# ---- to here ----
