"""Audit claimed results against a derivation, and say where a hand calculation first went wrong.

Each claim is compared exactly with the recorded result it names: the
difference goes through the same exact arithmetic as the derivation (or,
for expressions the field cannot hold, sympy's simplifier and then random
points), so "agrees" and "differs" are proofs and "cannot be decided" says
why.  A wrong claim is diagnosed in words where a typical slip explains it
(a sign, a factor of 2, swapped indices, another sign convention, a
stress-energy component left without its 1/kappa, the cross terms of a
geodesic equation counted once).  Among the wrong claims, those that depend
on no other wrong claim through the recorded steps (and, for the matter and
geodesic quantities, through the components they are built from) are the
earliest: where the calculation went astray.

The matter quantities carry pi (kappa = 8 pi); the comparison treats pi as
an indeterminate, which is exact because pi is transcendental.  An ansatz
solution agrees when it is the recorded general solution for some
values of its integration constants, the same values for every claim of the
file.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, field, replace
from typing import Any, Mapping

import sympy
from sympy.core.function import AppliedUndef

from .algebra import choose_arithmetic, printer_stable
from .chain import canonical_lowered
from .record import Derivation
from .claims import Claim
from .quantities import (QUANTITIES, claimable, component_text, in_position, index_positions, indexed_tex,
                         position_words, route)
from .record import Step, Verdict, as_expression

AGREES, DIFFERS, UNDECIDED, UNREADABLE = "agrees", "differs", "cannot be decided", "unreadable"

_CLAIMABLE = claimable()
SCALARS = frozenset(name for name, q in _CLAIMABLE.items() if q.rank == 0)
#: Quantities of the matter stage: computed only when the metric file has a [matter] table.
MATTER_QUANTITIES = frozenset(name for name, q in _CLAIMABLE.items() if q.requires == "matter")
#: Matter quantities that carry 1/kappa.
KAPPA_SCALED = frozenset(name for name, q in _CLAIMABLE.items() if q.kappa_scaled)
#: Quantities read in the orthonormal frame.
FRAME_QUANTITIES = frozenset(name for name, q in _CLAIMABLE.items()
                             if q.in_frame or q.step_id == "density_and_pressures")


#: pi as an indeterminate, so that the exact field can hold it: pi is transcendental, so a rational
#: function of pi (with rational coefficients) vanishes exactly when it vanishes identically in PI.
PI = sympy.Dummy("pi", positive=True)


@dataclass(frozen=True)
class ClaimVerdict:
    claim: Claim
    outcome: str
    checked_against: str
    correct: sympy.Expr | None
    difference: sympy.Expr | None
    diagnosis: str
    evidence: str
    #: For an ansatz solution: the values of the recorded integration constants that make it the claim.
    constants: tuple[tuple[str, sympy.Expr], ...] = ()
    #: The slip the diagnosis names, as data, for every claim that differs (empty otherwise): its "kind" and
    #: the fields an exporter typesets it from.  {"kind": "index_position", "positions": the other position,
    #: ...} and {"kind": "metric_factor", "factor": [table, component]} (:func:`slip_sentence` makes their
    #: words from the data); "correct_is_zero", "claim_is_zero", "none"; "sign_flip" with "hint" (a key of
    #: :data:`SIGN_HINTS`, "" for none); "factor" with the exact "ratio"; "kappa_missing" (with "lambda":
    #: whether the Lambda term is there), "einstein_only", "lambda_missing", "kappa_twice", each with "kappa"
    #: and "einstein": {"positions", "component"} (positions "ff": frame indices); "cross_terms_once" with
    #: "direction" and "sign_lost"; "swapped_indices" with "quantity", "positions", "component", "other";
    #: "other_direction" with "quantity", "component", "direction"; "density_for_pressure" with "component".
    slip: Mapping[str, Any] = field(default_factory=dict)
    #: Steps the audit recorded to check this claim: its component raised or lowered into the claimed
    #: index position when the derivation holds none in that position.
    steps: tuple[Step, ...] = ()
    #: How the rewrites of :mod:`stepper.identities` decided the difference, when they were tried (as data:
    #: the rewrites applied, the one that settled it, the function signs used, what stopped them).
    zero_test: Mapping[str, Any] = field(default_factory=dict)
    #: The arithmetic's own zero test of the difference, as data (algebra.ZeroTest.as_data: "how",
    #: "vanishes", and "points", "digits" or "magnitude" where they apply).
    test: Mapping[str, Any] = field(default_factory=dict)
    #: For an ansatz solution, how the claim was compared with the recorded general solution, as data:
    #: "case" ("recorded", "other branch", "no constants"), "fixed" ([[constant, value, claim number], ...]
    #: fixed by earlier claims), "solves" (does it solve the recorded equation), "contradicts" (the recorded
    #: solution only for constants that contradict an earlier claim), "equation_test" (the zero test of the
    #: equation, as data).
    solution: Mapping[str, Any] = field(default_factory=dict)


#: The explanations a sign flip may have, keyed by the hint recorded in a "sign_flip" slip; the quantities
#: each is given for.
SIGN_HINTS = {
    "riemann_formula": ("riemann",),
    "riemann_sign": ("riemann_lowered",),
    "ricci_contraction": ("ricci",),
    "curvature_sign": ("frame_ricci", "scalar", "einstein", "stress_energy", "frame_stress_energy",
                       "stress_energy_up"),
    "curvature_sign_or_signature": ("stress_energy_mixed",),
    "density_from_mixed": ("energy_density",),
    "tension": ("pressure",),
    "geodesic_minus": ("geodesic_acceleration",),
}
_HINT_OF = {quantity: hint for hint, quantities in SIGN_HINTS.items() for quantity in quantities}


# index positions -------------------------------------------------------------------
def subject(claim: Claim) -> Claim:
    """The claim as the quantity it is compared with: a claim in another index position than its quantity's
    becomes a claim of the registry's quantity in that position (einstein "ud" is einstein_mixed); when the
    registry has none, a claim of the tensor (its ``tensor`` entry) with the positions as ``indices``."""
    if not claim.indices or claim.indices == QUANTITIES[claim.quantity].positions:
        return replace(claim, indices="")
    member = in_position(claim.quantity, claim.indices)
    if member is not None:
        return replace(claim, quantity=member.name, indices="")
    return replace(claim, quantity=QUANTITIES[claim.quantity].tensor)


def is_positioned(claim: Claim) -> bool:
    """Is ``claim`` (a :func:`subject`) in an index position no quantity of the registry holds?"""
    return bool(claim.indices) and in_position(claim.quantity, claim.indices) is None


def position_step_id(tensor: str, positions: str, component: str) -> str:
    return f"position/{tensor}/{positions}/{component}"


_DUMMIES = "cdefhkmnpqs"


def _factor_text(factor) -> str:
    table, key = factor
    return component_text("g", "uu" if table == "inverse_metric" else "dd", key.split(","))


def relation_text(tensor: str, positions: str, other: str, component: str, terms: list) -> str:
    """X in ``positions`` at ``component`` written with X in ``other`` positions: G^t_t = g^tt G_tt; when the
    sum has more than four terms, with dummy indices (G^t_r = g^tc G_cr, summed over c)."""
    symbol = QUANTITIES[tensor].symbol
    names = component.split(",")
    lhs = component_text(symbol, positions, names)
    if len(terms) <= 4:
        shown = [" ".join([_factor_text(f) for f in t["factors"]] +
                          [component_text(symbol, other, t["component"].split(","))]) for t in terms]
        return f"{lhs} = {' + '.join(shown) or '0'}"
    free = [d for d in _DUMMIES if d not in names]
    inner, factors, used = list(names), [], []
    for k, (old, new) in enumerate(zip(other, positions)):
        if old != new:
            dummy = free[len(used)]
            used.append(dummy)
            factors.append(component_text("g", new * 2, [names[k], dummy]))
            inner[k] = dummy
    return f"{lhs} = {' '.join(factors)} {component_text(symbol, other, inner)}, summed over {', '.join(used)}"


def slip_sentence(slip: Mapping[str, Any]) -> str:
    """The diagnosis in words, made from the slip's data (ClaimVerdict.slip)."""
    if slip.get("kind") == "index_position":
        tensor, component = slip["tensor"], slip["component"]
        other = component_text(QUANTITIES[tensor].symbol, slip["positions"], component.split(","))
        relation = relation_text(tensor, slip["claimed"], slip["positions"], component, slip["terms"])
        return (f"an index raised or lowered: the claim is {other}, the component with "
                f"{position_words(slip['positions'])}; {relation}")
    if slip.get("kind") == "metric_factor":
        g = _factor_text(slip["factor"])
        words = "inverse-metric" if slip["factor"][0] == "inverse_metric" else "metric"
        return f"off by a factor of the {words} component {g}: the claim is {g} times the correct value"
    raise ValueError(f"unknown slip {slip.get('kind')!r}")


def _unknown_named(derivation: Derivation, name: str) -> sympy.Expr | None:
    for f in derivation.metric.functions:
        if f.func.__name__ == name:
            return f
    return None


def _solve_step(derivation: Derivation, function: sympy.Expr | None) -> str | None:
    for step in derivation.steps:
        if step.kind == "ode solution" and isinstance(step.result, dict) and step.result.get("unknown") == function:
            return step.id
    return None


def correct_value(derivation: Derivation, quantity: str, component: str) -> tuple[sympy.Expr, str]:
    """The recorded value of a component (zero when not listed) and the id of the step that holds it
    (the metric's step when the derivation has no step for it)."""
    value, step_id = _recorded(derivation, quantity, component)
    if step_id not in {s.id for s in derivation.steps}:
        step_id = "metric"
    return value, step_id


def _recorded(derivation: Derivation, quantity: str, component: str) -> tuple[sympy.Expr, str]:
    results = derivation.results
    ids = {s.id for s in derivation.steps}
    if quantity in SCALARS:
        if quantity == "energy_density":
            return results.get("energy_density", sympy.Integer(0)), "density_and_pressures"
        return results.get(quantity, sympy.Integer(0)), quantity
    if quantity == "ansatz_solution":
        f = _unknown_named(derivation, component)
        solution = results.get("ansatz", {}).get("solution", {})
        value = solution.get(str(f), sympy.Integer(0)) if f is not None else sympy.Integer(0)
        step_id = _solve_step(derivation, f) or ("ansatz/solution" if "ansatz/solution" in ids else "metric")
        return value, step_id
    names = derivation.metric.names
    parts = component.split(",")
    index = tuple(names.index(p) for p in parts)
    key = lambda idx: ",".join(names[i] for i in idx)
    table = results.get(QUANTITIES[quantity].key, {})
    if quantity in ("riemann_lowered", "weyl"):
        sign, canonical = canonical_lowered(index)
        value = sign * table.get(key(canonical), sympy.Integer(0)) if sign else sympy.Integer(0)
        return printer_stable(value), quantity
    value = table.get(component, sympy.Integer(0))
    step_id = QUANTITIES[quantity].step_id
    if quantity == "christoffel":
        a, b, c = index
        step_id = f"christoffel/{key((a, min(b, c), max(b, c)))}"
    elif quantity == "riemann":
        a, b, c, d = index
        step_id = f"riemann/{key((a, b, min(c, d), max(c, d)))}"
    elif quantity in ("ricci", "einstein", "stress_energy"):
        step_id = f"{quantity}/{key(tuple(sorted(index)))}"
    if step_id not in ids:
        step_id = quantity if quantity in ids else "metric"
    return value, step_id


def unavailable(derivation: Derivation, quantity: str, component: str) -> str:
    """Why the derivation holds no value for this claim ('' when it does)."""
    r = derivation.results
    what = QUANTITIES[quantity].words
    if quantity in MATTER_QUANTITIES:
        if "field_equations" not in r:
            return (f"the derivation did not compute the {what}: the metric file has no [matter] table "
                    "(add one to ask for the stress-energy tensor the metric requires)")
        frame = r.get("frame", {})
        if quantity in FRAME_QUANTITIES and not frame.get("built", False):
            return f"the derivation did not compute the {what}: {frame.get('reason', 'no orthonormal frame was built')}"
        if quantity in ("energy_density", "pressure"):
            try:
                diagonal = derivation.step("density_and_pressures").result.get("diagonal", True)
            except (KeyError, AttributeError):
                diagonal = True
            if not diagonal:
                return ("the stress-energy tensor is not diagonal in the orthonormal frame, so its energy density "
                        "and principal pressures are not read off (stepper does not diagonalise it)")
        if quantity == "pressure" and component not in r.get("pressures", {}):
            return f"'{component}' is not a spatial direction of the orthonormal frame"
        return ""
    if quantity == "ansatz_solution":
        ansatz = r.get("ansatz")
        if ansatz is None:
            return ("the derivation did not solve an ansatz: the metric file has no [ansatz] table "
                    "(add one naming the unknown functions)")
        f = _unknown_named(derivation, component)
        unknowns = derivation.step("ansatz/equations").params.get("unknowns", []) if \
            any(s.id == "ansatz/equations" for s in derivation.steps) else []
        if f is None or f not in unknowns:
            shown = ", ".join(str(u.func.__name__) for u in unknowns)
            return f"{component} is not one of the ansatz's unknowns ({shown})"
        if str(f) not in ansatz.get("solution", {}):
            why = ansatz.get("unsolved", "the equations were not solved for it")
            return f"stepper did not solve for {f}: {why}"
        return ""
    key = QUANTITIES[quantity].key
    if key not in r:
        return f"the derivation did not compute the {what} (it was run with --skip-invariants)"
    return ""


class Auditor:
    """Compares claims with one derivation."""

    def __init__(self, derivation: Derivation):
        self.d = derivation
        self.m = derivation.metric
        fe = derivation.results.get("field_equations", {})
        self.kappa = fe.get("kappa", 8 * sympy.pi)
        self.lam = fe.get("cosmological_constant", sympy.Integer(0))
        self.fitted: dict[sympy.Symbol, sympy.Expr] = {}  # integration constants fixed by earlier claims
        self.fitted_by: dict[sympy.Symbol, int] = {}
        self.moved: dict[tuple[str, str, str], sympy.Expr] = {}  # components raised or lowered, unsimplified
        self.position_steps: dict[str, Step] = {}

    def arithmetic_for(self, *expressions: sympy.Expr):
        coordinates = set(self.m.coordinates)
        known = list(self.m.parameters) + [s for s in getattr(self.m, "extra_symbols", ()) if s not in self.m.parameters]
        extra = sorted({s for e in expressions for s in e.free_symbols
                        if s not in coordinates and s not in known}, key=lambda s: s.name)
        return choose_arithmetic(self.m.coordinates, list(self.m.matrix) + list(expressions), tuple(known) + tuple(extra))

    def vanishes(self, expr: sympy.Expr) -> tuple[bool | None, str]:
        original = expr
        expr = expr.xreplace({sympy.pi: PI})
        A = self.arithmetic_for(expr)
        test = A.zero_test(A.from_expr(expr))
        self.__dict__.setdefault("plain_tests", {})[original] = test.as_data()
        # The stronger zero test (stepper.identities) where the arithmetic's own could not prove a zero:
        # rewrites that settle trigonometric, hyperbolic, exponential and logarithmic identities, with free
        # functions carrying their declared signs.  A "non-zero" found by sampling, which gives free
        # functions no declared sign, is re-examined when the expression holds a function with one.
        # What it found, as data, is kept in self.identity_tests (keyed by the expression tested).
        from .identities import prove_zero, uses_signed_functions
        signs = self.m.function_signs
        if test.vanishes is True or (test.vanishes is False and
                                     (A.name == "field" or not uses_signed_functions(original, signs))):
            return test.vanishes, test.evidence
        found = prove_zero(original, signs)
        self.__dict__.setdefault("identity_tests", {})[original] = found
        if found.vanishes:
            return True, found.sentence()
        if test.vanishes is None:
            return None, f"{test.evidence}; {found.sentence()}"
        return test.vanishes, test.evidence

    def simplified(self, expr: sympy.Expr) -> sympy.Expr:
        expr = expr.xreplace({sympy.pi: PI})
        A = self.arithmetic_for(expr)
        return A.to_expr(A.from_expr(expr)).xreplace({PI: sympy.pi})

    # index positions --------------------------------------------------------
    def value_in(self, quantity: str, positions: str, component: str) -> sympy.Expr:
        """The component of the tensor of ``quantity`` in ``positions``: recorded when the registry has a
        quantity in that position, else raised or lowered from one (unsimplified)."""
        member = in_position(quantity, positions)
        if member is not None:
            return correct_value(self.d, member.name, component)[0]
        key = (QUANTITIES[quantity].tensor, positions, component)
        if key not in self.moved:
            source, _, _ = route(quantity, positions)
            self.moved[key] = self.moved_from(source.name, source.positions, positions, component)[0]
        return self.moved[key]

    def moved_from(self, source: str, source_positions: str, positions: str, component: str) -> tuple[sympy.Expr, list]:
        """The component in ``positions`` from the tensor in ``source_positions`` (the registry quantity
        ``source`` or, when none holds that position, the value :meth:`value_in` gives): each index that is
        down there and up here raised with g^ab, each the other way lowered with g_ab.  With the non-zero
        terms as data: [{"factors": [[table, component], ...], "component": the source's component}]."""
        names = component.split(",")
        slots = [k for k, (old, new) in enumerate(zip(source_positions, positions)) if old != new]
        results = self.d.results
        total, terms = sympy.Integer(0), []
        for dummies in itertools.product(self.m.names, repeat=len(slots)):
            factors, product, inner = [], sympy.Integer(1), list(names)
            for k, e in zip(slots, dummies):
                table = "inverse_metric" if positions[k] == "u" else "metric"
                key = f"{names[k]},{e}"
                g = as_expression(results.get(table, {}).get(key, 0))
                if g == 0:
                    break
                factors.append([table, key])
                product *= g
                inner[k] = e
            else:
                key = ",".join(inner)
                value = (correct_value(self.d, source, key)[0] if QUANTITIES[source].positions == source_positions
                         else self.value_in(source, source_positions, key))
                if value == 0:
                    continue
                terms.append({"factors": factors, "component": key})
                total += product * value
        return total, terms

    def position_step(self, quantity: str, positions: str, component: str) -> Step:
        """The step that raises or lowers a component into ``positions`` for the audit (one per tensor,
        position and component, however many claims read it)."""
        tensor = QUANTITIES[quantity].tensor
        step_id = position_step_id(tensor, positions, component)
        if step_id in self.position_steps:
            return self.position_steps[step_id]
        source, kind, slots = route(quantity, positions)
        total, terms = self.moved_from(source.name, source.positions, positions, component)
        value = printer_stable(self.simplified(total))
        metric = "inverse_metric" if kind == "raising" else "metric"
        uses = [metric]
        for term in terms:
            _, used = correct_value(self.d, source.name, term["component"])
            if used not in uses:
                uses.append(used)
        if len(uses) == 1:
            uses.append(correct_value(self.d, source.name, component)[1])
        head = QUANTITIES[tensor].symbol
        names = component.split(",")
        letters = "abcdef"[:len(positions)]
        dummies = [d for d in "cdefhk" if d not in letters]
        inner = list(letters)
        metric_tex = []
        for n, k in enumerate(slots):
            inner[k] = dummies[n]
            metric_tex.append(indexed_tex("g", positions[k] * 2, [letters[k], dummies[n]]))
        staggered = QUANTITIES[tensor].staggered
        general = (indexed_tex(head, positions, list(letters), staggered) + " = " + " ".join(metric_tex) + " "
                   + indexed_tex(head, source.positions, inner, staggered))
        tex = ["{" + sympy.latex(sympy.Symbol(n)) + "}" for n in names]
        shown = []
        for term in terms:
            factor_tex = [indexed_tex("g", "uu" if table == "inverse_metric" else "dd",
                                      ["{" + sympy.latex(sympy.Symbol(n)) + "}" for n in key.split(",")])
                          for table, key in term["factors"]]
            source_tex = indexed_tex(head, source.positions,
                                     ["{" + sympy.latex(sympy.Symbol(n)) + "}" for n in term["component"].split(",")],
                                     staggered)
            shown.append(" ".join(factor_tex) + " " + source_tex)
        what = component_text(head, positions, names)
        step = Step(
            id=step_id, kind=kind, stage="audit", quantity=tensor, component=component,
            annotation=(f"The {QUANTITIES[tensor].words} with {position_words(positions)}, {what}, for the audit: "
                        f"{'raised' if kind == 'raising' else 'lowered'} from the {QUANTITIES[source.name].words} "
                        f"with the {'inverse metric' if kind == 'raising' else 'metric'}."),
            formula=general,
            substituted=indexed_tex(head, positions, tex, staggered) + " = " + (" + ".join(shown) or "0"),
            uses=tuple(uses), result=value,
            params={"positions": positions, "source": source.name, "source_positions": source.positions,
                    "slots": list(slots), "terms": terms})
        self.position_steps[step_id] = step
        return step

    def check(self, claim: Claim) -> ClaimVerdict:
        seen = subject(claim)
        component = "" if QUANTITIES[claim.quantity].rank == 0 else claim.component
        steps: tuple[Step, ...] = ()
        if is_positioned(seen):
            source, _, _ = route(seen.quantity, seen.indices)
            missing = unavailable(self.d, source.name, component)
            if missing:
                return ClaimVerdict(claim, UNDECIDED, correct_value(self.d, source.name, component)[1], None, None,
                                    "", missing)
            step = self.position_step(seen.quantity, seen.indices, component)
            correct, step_id, steps = step.result, step.id, (step,)
        else:
            correct, step_id = correct_value(self.d, seen.quantity, component)
            missing = unavailable(self.d, seen.quantity, component)
            if missing:
                return ClaimVerdict(claim, UNDECIDED, step_id, None, None, "", missing)
        if claim.expr is None:
            return ClaimVerdict(claim, UNREADABLE, step_id, correct, None, "",
                                f"the claimed value could not be read: {claim.problem}", steps=steps)
        if claim.quantity == "ansatz_solution":
            return self.check_solution(claim, correct, step_id)
        difference = claim.expr - correct
        zero, evidence = self.vanishes(difference)
        found = getattr(self, "identity_tests", {}).get(difference)
        zero_test = found.as_data() if found is not None else {}
        test = self.plain_test(difference)
        if zero is True:
            return ClaimVerdict(claim, AGREES, step_id, correct, sympy.Integer(0), "", f"the difference: {evidence}",
                                steps=steps, zero_test=zero_test, test=test)
        if zero is None:
            return ClaimVerdict(claim, UNDECIDED, step_id, correct, self.simplified(difference), "",
                                f"the difference: {evidence}", steps=steps, zero_test=zero_test, test=test)
        words, slip = self.diagnosis(seen, correct)
        return ClaimVerdict(claim, DIFFERS, step_id, correct, self.simplified(difference),
                            words, f"the difference: {evidence}", slip=slip, steps=steps, test=test)

    def plain_test(self, expr: sympy.Expr) -> dict:
        """The arithmetic's own zero test of ``expr`` (after :meth:`vanishes` ran on it), as data."""
        return dict(getattr(self, "plain_tests", {}).get(expr, {}))

    # ansatz solutions -------------------------------------------------------
    def recorded_constants(self) -> list[sympy.Symbol]:
        return [sympy.Symbol(name, real=True) for name in self.d.results.get("ansatz", {}).get("constants", [])]

    def check_solution(self, claim: Claim, correct: sympy.Expr, step_id: str) -> ClaimVerdict:
        """An ansatz solution agrees when it is the recorded one for some values of the integration
        constants (the same values as for the claims before it)."""
        constants = [c for c in self.recorded_constants() if correct.has(c)]
        dummies = {c: sympy.Dummy(c.name, real=True) for c in constants}
        general = correct.xreplace(dummies)
        fixed = {dummies[c]: v for c, v in self.fitted.items() if c in dummies}
        free = [dummies[c] for c in constants if dummies[c] not in fixed]
        candidates = self.fits(general.xreplace(fixed), claim.expr, free)
        name = f"{claim.component}"
        for values in candidates:
            specific = general.xreplace(fixed).xreplace(values)
            if specific.has(*dummies.values()):
                continue
            zero, evidence = self.vanishes(claim.expr - specific)
            if zero is True:
                assignments = {}
                for c in constants:
                    d = dummies[c]
                    if d in fixed:
                        assignments[c] = fixed[d]
                    elif d in values:
                        assignments[c] = values[d]
                        self.fitted[c] = values[d]
                        self.fitted_by[c] = claim.number
                shown = ", ".join(f"{c} = {v}" for c, v in assignments.items() if v != c)
                return ClaimVerdict(claim, AGREES, step_id, correct, sympy.Integer(0), "",
                                    f"the claim is the recorded solution {name} = {correct}"
                                    + (f" with {shown}" if shown else "") + f"; the difference: {evidence}",
                                    tuple((c.name, printer_stable(v)) for c, v in assignments.items() if v != c),
                                    test=self.plain_test(claim.expr - specific),
                                    solution={"case": "recorded"})
        # no values of the constants make them equal
        difference = printer_stable(self.simplified(claim.expr - correct))
        solves, how = self.solves_equation(claim, step_id)
        data = {"fixed": self.fixed_data(), "solves": solves, "equation_test": self.equation_test}
        if solves is True:
            return ClaimVerdict(claim, UNDECIDED, step_id, correct, difference, "",
                                f"the claimed function solves the equation of {step_id} ({how}), but it is not the "
                                f"recorded general solution {name} = {correct} for any values of its constants"
                                + self.fixed_words() + ": another branch or a special solution",
                                solution={"case": "other branch", **data})
        diagnosis, slip = self.diagnosis(claim, correct)
        contradicts = False
        if self.fitted and not candidates:
            alone = self.fits(general, claim.expr, [dummies[c] for c in constants])
            for values in alone:
                if self.vanishes(claim.expr - general.xreplace(values))[0] is True:
                    diagnosis = ("it is the recorded solution only for constants that contradict an earlier claim"
                                 + self.fixed_words())
                    contradicts = True
                    break
        if solves is False:
            diagnosis += f"; it does not solve the equation of {step_id}" if diagnosis else \
                f"it does not solve the equation of {step_id}"
        return ClaimVerdict(claim, DIFFERS, step_id, correct, difference, diagnosis,
                            f"no values of the integration constants make the recorded solution {name} = {correct} "
                            f"equal to the claim{self.fixed_words()}", slip={} if contradicts else slip,
                            solution={"case": "no constants", "contradicts": contradicts, **data})

    def fixed_data(self) -> list:
        """The constants fixed by earlier claims, as data: [[name, value, claim number], ...] (the value is the
        constant itself when the claim kept it)."""
        return [[c.name, printer_stable(v), self.fitted_by[c]] for c, v in self.fitted.items()]

    def fixed_words(self) -> str:
        if not self.fitted:
            return ""
        return " (with " + ", ".join((f"{c} as in claim {self.fitted_by[c]}" if v == c else
                                       f"{c} = {v} from claim {self.fitted_by[c]}") for c, v in self.fitted.items()) + ")"

    def fits(self, general: sympy.Expr, claimed: sympy.Expr, free: list) -> list[dict]:
        """Values of the free constants for which general equals claimed at sample points (to be verified)."""
        if not free:
            return [{}]
        if len(free) > 4:
            return []
        coordinates = [x for x in self.m.coordinates if general.has(x) or claimed.has(x)]
        samples = [sympy.Rational(p, q) for p, q in ((3, 1), (7, 2), (5, 1), (13, 3), (11, 2), (17, 3), (9, 4))]
        equations = []
        for k in range(len(free) + 2):
            point = {x: samples[(k + j) % len(samples)] + j for j, x in enumerate(coordinates)}
            equations.append(sympy.numer(sympy.together((general - claimed).subs(point))))
        try:
            solutions = sympy.solve(equations, free, dict=True)
        except (NotImplementedError, ValueError, TypeError):
            return []
        return [s for s in solutions if all(not v.has(*self.m.coordinates) and not v.has(*free) for v in s.values())]

    def solves_equation(self, claim: Claim, step_id: str) -> tuple[bool | None, str]:
        """Does the claimed function solve the equation recorded in the step that solved for it?  (Its zero
        test, as data, is left in ``self.equation_test``.)"""
        self.equation_test = {}
        try:
            step = self.d.step(step_id)
        except KeyError:
            return None, ""
        if not isinstance(step.result, dict) or "equation" not in step.result:
            return None, ""
        f = step.result["unknown"]
        equation = step.result["equation"].xreplace(self.fitted)
        value = sympy.together(equation.subs(f, claim.expr).doit())
        zero, evidence = self.vanishes(value)
        found = getattr(self, "identity_tests", {}).get(value)
        self.equation_test = {**self.plain_test(value), **({"identities": found.as_data()} if found else {})}
        return zero, evidence

    # slips ----------------------------------------------------------------
    def diagnose(self, claim: Claim, correct: sympy.Expr) -> str:
        return self.diagnosis(claim, correct)[0]

    def diagnosis(self, claim: Claim, correct: sympy.Expr) -> tuple[str, dict]:
        """The likely slip in words, and as data when it has a form (see :func:`slip_sentence`).  ``claim``
        is the :func:`subject` of the claim as written."""
        claimed = claim.expr
        if self.vanishes(correct)[0]:
            return "the correct value is 0: this component vanishes", {"kind": "correct_is_zero"}
        if self.vanishes(claimed)[0]:
            return "the claim says 0, but this component does not vanish", {"kind": "claim_is_zero"}
        words, slip = self.matter_slip(claim, correct)
        if not words:
            words, slip = self.geodesic_slip(claim, correct)
        if words:
            return words, slip
        ratio = self.simplified(claimed / correct)
        words, slip = self.ratio_words(ratio, claim.quantity)
        if words:  # a constant factor first: where g_tt g_rr = -1, a sign flip is also an index moved
            return words, slip
        slip = self.index_position_slip(claim)
        if slip:
            return slip_sentence(slip), slip
        slip = self.metric_factor_slip(claim, correct)
        if slip:
            return slip_sentence(slip), slip
        words, slip = self.swapped_indices(claim)
        if words:
            return words, slip
        return "no typical slip explains the difference", {"kind": "none"}

    def other_positions(self, claim: Claim) -> list[str]:
        """The index positions of the claim's tensor other than the claimed one: the registry's first (in
        its order), then the others, fewest changed indices first."""
        if claim.quantity not in QUANTITIES or not index_positions(claim.quantity) or not claim.component:
            return []
        positions = claim.positions
        known = [p for p in index_positions(claim.quantity) if p != positions]
        rest = sorted((("".join(p) for p in itertools.product("ud", repeat=len(positions))
                        if "".join(p) != positions and "".join(p) not in known)),
                      key=lambda p: (sum(a != b for a, b in zip(p, positions)), p.replace("u", "0").replace("d", "1")))
        return known + rest

    def index_position_slip(self, claim: Claim) -> dict:
        """The claimed value is the same component in another index position (G_tt claimed as G^t_t)."""
        positions = claim.positions
        for other in self.other_positions(claim):
            value = self.value_in(claim.quantity, other, claim.component)
            if value == 0 or self.vanishes(claim.expr - value)[0] is not True:
                continue
            _, terms = self.moved_from(claim.quantity, other, positions, claim.component)
            return {"kind": "index_position", "tensor": QUANTITIES[claim.quantity].tensor,
                    "component": claim.component, "claimed": positions, "positions": other, "terms": terms}
        return {}

    def metric_factor_slip(self, claim: Claim, correct: sympy.Expr) -> dict:
        """claimed / correct is a component of the metric or of its inverse (a factor g_rr too many)."""
        q = QUANTITIES.get(claim.quantity)
        if q is None or not q.positions or set(q.positions) - {"u", "d"}:
            return {}
        names = self.m.names
        for table in ("metric", "inverse_metric"):
            for key, g in self.d.results.get(table, {}).items():
                i, j = key.split(",")
                g = as_expression(g)
                if names.index(i) > names.index(j) or g.is_number:
                    continue
                if self.vanishes(claim.expr - g * correct)[0] is True:
                    return {"kind": "metric_factor", "factor": [table, key]}
        return {}

    def ratio_words(self, ratio: sympy.Expr, quantity: str) -> tuple[str, dict]:
        """A constant ratio claimed/correct in words, and as data ("sign_flip" or "factor")."""
        words = self.ratio_sentence(ratio, quantity)
        if not words:
            return "", {}
        if ratio == -1:
            return words, {"kind": "sign_flip", "hint": _HINT_OF.get(quantity, "")}
        return words, {"kind": "factor", "ratio": printer_stable(ratio)}

    def ratio_sentence(self, ratio: sympy.Expr, quantity: str) -> str:
        if not ratio.is_Rational:
            constants = set(self.m.parameters) | set(getattr(self.m, "extra_symbols", ()))
            if ratio.is_number or (ratio.free_symbols and ratio.free_symbols <= constants
                                   and not ratio.has(AppliedUndef) and quantity != "ansatz_solution"):
                return f"off by a constant factor: the claim is {ratio} times the correct value"
            return ""
        if ratio == -1:
            base = "a sign flip: the claim is minus the correct value"
            curvature_sign = "; an opposite sign convention for the Riemann or Ricci tensor would explain it"
            hint = {
                "riemann": "; an overall sign convention for the Riemann tensor opposite to this derivation's "
                           "(R^a_bcd = d_c Gamma^a_db - ...) would explain it",
                "riemann_lowered": "; an overall sign convention for the Riemann tensor opposite to this "
                                   "derivation's would explain it",
                "ricci": "; contracting the Riemann tensor on its last index (R_bd = R^a_bda) instead of the "
                         "third, or the opposite Riemann sign, would explain it",
                "frame_ricci": "; an opposite sign convention for the Riemann or Ricci tensor would explain it",
                "scalar": curvature_sign,
                "einstein": curvature_sign,
                "stress_energy": curvature_sign,
                "frame_stress_energy": curvature_sign,
                "stress_energy_up": curvature_sign,
                "stress_energy_mixed": curvature_sign + ", and so would a metric of the opposite signature "
                                                        "(which flips T^i_j but not T_ij)",
                "energy_density": "; reading rho off the mixed component T^t_t, which is -rho for observers at rest, "
                                  "would explain it",
                "pressure": "; a tension (tau = -p, as for the radial stress of a wormhole throat) written as a "
                            "pressure would explain it",
                "geodesic_acceleration": "; the minus sign of du^a/dtau = -Gamma^a_bc u^b u^c was lost",
            }.get(quantity, "")
            return base + hint
        if ratio == 2:
            return "an extra factor of 2: the claim is twice the correct value"
        if ratio == sympy.Rational(1, 2):
            return "a missing factor of 2: the claim is half the correct value (a lost 1/2 is a common cause)"
        if ratio == -2 or ratio == sympy.Rational(-1, 2):
            return f"a sign flip and a factor of 2: the claim is {ratio} times the correct value"
        return f"off by a constant factor: the claim is {ratio} times the correct value"

    def matter_slip(self, claim: Claim, correct: sympy.Expr) -> tuple[str, dict]:
        """A stress-energy value that is G_ij (or G_ij + Lambda g_ij): the field equations not divided by kappa,
        or the cosmological-constant term left out; in words and as data."""
        q = claim.quantity
        if q not in KAPPA_SCALED:
            return "", {}
        metric_part = self.metric_part(q, claim.component)
        kappa = self.kappa
        kappa_words = "8 pi" if kappa == 8 * sympy.pi else f"kappa = {kappa}"
        c = claim.component
        frame = self.d.results.get("frame", {}).get("time", "0")
        einstein = {"stress_energy": f"G_{c}", "stress_energy_mixed": f"G^{c.split(',')[0]}_{c.split(',')[-1]}",
                    "stress_energy_up": f"G^{c}",
                    "frame_stress_energy": "G_" + "".join(f"({x})" for x in c.split(",")),
                    "energy_density": f"G_({frame})({frame})",
                    "pressure": f"G_({c})({c})"}[q]
        # the Einstein component as data: its index positions ("ff": frame indices) and component
        positions = {"stress_energy": "dd", "stress_energy_mixed": "ud", "stress_energy_up": "uu"}.get(q, "ff")
        names = {"energy_density": f"{frame},{frame}", "pressure": f"{c},{c}"}.get(q, c)
        if is_positioned(claim):  # T in a position of its own: Lambda multiplies g in that position
            metric_part = self.value_in("metric", claim.indices, c)
            einstein = component_text("G", claim.indices, c.split(","))
            positions = claim.indices
        data = {"kappa": kappa, "einstein": {"positions": positions, "component": names}}
        kinds = []
        candidates = []
        if self.lam == 0:
            kinds.append({"kind": "kappa_missing", "lambda": False})
            candidates.append((kappa * correct, f"a missing 1/({kappa_words}): the claim is {kappa_words} times "
                                                f"the correct value, i.e. the Einstein tensor component {einstein} "
                                                f"instead of T = {einstein}/({kappa_words})"))
        else:
            kinds.append({"kind": "kappa_missing", "lambda": True})
            candidates.append((kappa * correct, f"a missing 1/({kappa_words}): the claim is {kappa_words} times the "
                                                f"correct value, i.e. {einstein} + Lambda g instead of "
                                                f"T = ({einstein} + Lambda g)/({kappa_words})"))
            if metric_part is not None:
                kinds += [{"kind": "einstein_only"}, {"kind": "lambda_missing"}]
                candidates.append((kappa * correct - self.lam * metric_part,
                                   f"the claim is the Einstein tensor component {einstein}: both the factor "
                                   f"1/({kappa_words}) and the cosmological-constant term Lambda g are missing"))
                candidates.append((correct - self.lam * metric_part / kappa,
                                   f"the cosmological-constant term is missing: the claim is {einstein}/({kappa_words}) "
                                   f"instead of ({einstein} + Lambda g)/({kappa_words}) (the field equations are "
                                   "G + Lambda g = kappa T)"))
        kinds.append({"kind": "kappa_twice"})
        candidates.append((correct / kappa, f"divided by {kappa_words} once too often: the claim is the correct "
                                            f"value divided by {kappa_words}"))
        for kind, (value, words) in zip(kinds, candidates):
            if self.vanishes(claim.expr - value)[0] is True:
                return words, {**kind, **data}
        return "", {}

    def metric_part(self, quantity: str, component: str) -> sympy.Expr | None:
        """What Lambda multiplies in the field equations for this component: g_ij, delta^i_j, g^ij, eta or +-1."""
        r = self.d.results
        if quantity == "stress_energy":
            return r.get("metric", {}).get(component, sympy.Integer(0))
        if quantity == "stress_energy_up":
            return r.get("inverse_metric", {}).get(component, sympy.Integer(0))
        if quantity == "stress_energy_mixed":
            i, j = component.split(",")
            return sympy.Integer(1 if i == j else 0)
        time = r.get("frame", {}).get("time")
        if quantity == "frame_stress_energy":
            a, b = component.split(",")
            return sympy.Integer(0 if a != b else (-1 if a == time else 1))
        if quantity == "energy_density":
            return sympy.Integer(-1)  # G_(0)(0) = kappa rho - Lambda eta_00 = kappa rho + Lambda
        if quantity == "pressure":
            return sympy.Integer(1)
        return None

    def geodesic_slip(self, claim: Claim, correct: sympy.Expr) -> tuple[str, dict]:
        """The cross terms Gamma^a_bc u^b u^c (b != c) counted once instead of twice; in words and as data."""
        if claim.quantity != "geodesic_acceleration":
            return "", {}
        names = self.m.names
        a = claim.component
        gamma = self.d.results.get("christoffel", {})
        from .geodesics import velocity_symbols
        u = dict(zip(names, velocity_symbols(self.m)))
        once = sympy.Integer(0)
        for i, b in enumerate(names):
            for c in names[i:]:
                value = gamma.get(f"{a},{b},{c}", sympy.Integer(0))
                once -= value * u[b] * u[c]
        if self.vanishes(claim.expr - once)[0] is True and self.vanishes(once - correct)[0] is False:
            return ("the cross terms Gamma^a_bc u^b u^c with b != c are counted once; summing over all b and c "
                    "counts each twice (Gamma^a_bc = Gamma^a_cb)",
                    {"kind": "cross_terms_once", "direction": a, "sign_lost": False})
        if self.vanishes(claim.expr + once)[0] is True and self.vanishes(once - correct)[0] is False:
            return ("the cross terms with b != c are counted once and the overall minus sign is lost",
                    {"kind": "cross_terms_once", "direction": a, "sign_lost": True})
        return "", {}

    def swapped_indices(self, claim: Claim) -> tuple[str, dict]:
        """The claim is another ordering of the component's indices; in words and as data."""
        if claim.quantity in ("pressure", "geodesic_acceleration"):
            return self.other_direction(claim)
        parts = claim.component.split(",")
        if len(parts) < 2:
            return "", {}
        for order in itertools.permutations(range(len(parts))):
            other = [parts[i] for i in order]
            if other == parts:
                continue
            key = ",".join(other)
            value = (self.value_in(claim.quantity, claim.indices, key) if is_positioned(claim)
                     else correct_value(self.d, claim.quantity, key)[0])
            if self.vanishes(claim.expr - value)[0]:
                return (f"swapped indices: the claim equals the component ({','.join(other)}) "
                        f"rather than ({claim.component})",
                        {"kind": "swapped_indices", "quantity": claim.quantity, "positions": claim.indices,
                         "component": claim.component, "other": key})
        return "", {}

    def other_direction(self, claim: Claim) -> tuple[str, dict]:
        """A pressure or acceleration that belongs to another direction; in words and as data."""
        table = self.d.results.get(QUANTITIES[claim.quantity].key, {})
        for name, value in table.items():
            if name == claim.component or self.vanishes(value)[0]:
                continue
            if self.vanishes(claim.expr - value)[0] is True:
                return (f"the claim is the value for the direction {name}, not {claim.component}",
                        {"kind": "other_direction", "quantity": claim.quantity, "component": claim.component,
                         "direction": name})
        if claim.quantity == "pressure" and "energy_density" in self.d.results:
            rho = self.d.results["energy_density"]
            if self.vanishes(claim.expr - rho)[0] is True:
                return ("the claim is the energy density rho, not a pressure",
                        {"kind": "density_for_pressure", "component": claim.component})
        return "", {}


# where the calculation first went wrong -------------------------------------------
def ancestors(derivation: Derivation) -> dict[str, set[str]]:
    """For each step id, every step it depends on, directly or not."""
    out: dict[str, set[str]] = {}
    for step in derivation.steps:  # recorded in dependency order
        found = set(step.uses)
        for used in step.uses:
            found |= out.get(used, set())
        out[step.id] = found
    return out


def _support(derivation: Derivation, label: str) -> list[str]:
    """The coordinates a frame vector has components along."""
    return list(derivation.results.get("frame", {}).get("vectors", {}).get(label, {}))


def _pair(derivation: Derivation, i: str, j: str) -> str:
    names = derivation.metric.names
    return ",".join(sorted((i, j), key=names.index))


def _sources(derivation: Derivation, quantity: str, component: str) -> set[str] | None:
    """The steps and components a matter or geodesic claim is built from (None: use its step's ancestors).

    Components of a step that holds a whole table are named "step#component"."""
    ids = {s.id for s in derivation.steps}
    r = derivation.results
    names = derivation.metric.names
    parts = component.split(",") if component else []

    def nonzero(table: str, i: str, j: str) -> bool:
        return f"{i},{j}" in r.get(table, {})

    if quantity == "stress_energy":
        return {s for s in (f"einstein/{_pair(derivation, *parts)}", "metric") if s in ids}
    if quantity == "stress_energy_mixed":
        i, j = parts
        out = {"inverse_metric"}
        out |= {f"stress_energy/{_pair(derivation, k, j)}" for k in names if nonzero("inverse_metric", i, k)}
        return out & ids
    if quantity in ("ricci_mixed", "einstein_mixed"):
        i, j = parts
        lowered = QUANTITIES[quantity].tensor
        out = {"inverse_metric"}
        out |= {f"{lowered}/{_pair(derivation, k, j)}" for k in names if nonzero("inverse_metric", i, k)}
        return out & ids
    if quantity == "stress_energy_up":
        i, j = parts
        out = {"inverse_metric"}
        out |= {f"stress_energy/{_pair(derivation, k, l)}" for k in names for l in names
                if nonzero("inverse_metric", i, k) and nonzero("inverse_metric", j, l)}
        return out & ids
    if quantity in ("frame_stress_energy", "frame_ricci"):
        a, b = parts
        base = "stress_energy" if quantity == "frame_stress_energy" else "ricci"
        out = {"frame"} | {f"{base}/{_pair(derivation, i, j)}" for i in _support(derivation, a)
                           for j in _support(derivation, b)}
        return out & ids
    if quantity in ("energy_density", "pressure"):
        label = r.get("frame", {}).get("time", names[0]) if quantity == "energy_density" else parts[0]
        inner = _sources(derivation, "frame_stress_energy", f"{label},{label}") or set()
        return inner | {f"frame_stress_energy#{label},{label}"}
    if quantity == "geodesic_acceleration":
        return {s for s in ids if s.startswith(f"christoffel/{parts[0]},")}
    return None


def _position(v: ClaimVerdict) -> set[str]:
    """What a claim is about: its step, and the component of a step that holds a whole table."""
    c = v.claim
    if c.quantity == "energy_density":
        return {f"{v.checked_against}#rho"}
    return {v.checked_against, f"{v.checked_against}#{c.component}"} if c.component else {v.checked_against}


def _expand(derivation: Derivation, before: dict[str, set[str]], step_id: str) -> set[str]:
    """A step and what it depends on.  A stress-energy component depends on its own Einstein component
    and the metric only (its record also names the field-equations step, which names every G_ij)."""
    step = next((s for s in derivation.steps if s.id == step_id), None)
    if step is not None and step.kind == "component" and step.quantity == "stress_energy":
        out = {step_id}
        for source in _sources(derivation, "stress_energy", step.component) or set():
            out |= {source} | before.get(source, set())
        return out
    return {step_id} | before.get(step_id, set())


def _moved_sources(derivation: Derivation, step: Step) -> set[str]:
    """What a component raised or lowered for the audit is built from: the metric components it was
    multiplied by and the components it was raised or lowered from (with what those are built from)."""
    source = step.params["source"]
    out: set[str] = set()
    for term in step.params["terms"]:
        out |= {f"{table}#{key}" for table, key in term["factors"]}
        inner = _sources(derivation, source, term["component"])
        if inner is None:
            _, used = correct_value(derivation, source, term["component"])
            table_step = used in (QUANTITIES[source].step_id, "metric")
            inner = {f"{used}#{term['component']}" if table_step else used}
        out |= inner
    return out


def _upstream(derivation: Derivation, before: dict[str, set[str]], v: ClaimVerdict) -> set[str]:
    """Every step, and every component of a table step, the claimed value depends on."""
    seen = subject(v.claim)
    moved = next((s for s in v.steps if s.id == v.checked_against), None)
    if moved is not None:
        sources = _moved_sources(derivation, moved)
    else:
        sources = _sources(derivation, seen.quantity, seen.component)
    if sources is None:
        return set(before.get(v.checked_against, set()))
    out: set[str] = set()
    for s in sources:
        if "#" in s:  # one component of a table: what that component is built from
            out.add(s)
            step, component = s.split("#", 1)
            refined = ("frame_stress_energy", "frame_ricci", "stress_energy_mixed", "stress_energy_up", "ricci_mixed",
                       "einstein_mixed")
            inner = _sources(derivation, step, component) if step in refined else None
            if inner is None:
                out |= before.get(step, set())
            else:
                for i in inner:
                    out |= _expand(derivation, before, i)
        else:
            out |= _expand(derivation, before, s)
    return out


def audit_steps(verdicts: list[ClaimVerdict]) -> list[Step]:
    """The steps the audit recorded to check the claims (components raised or lowered), each once."""
    steps: dict[str, Step] = {}
    for v in verdicts:
        for step in v.steps:
            steps.setdefault(step.id, step)
    return list(steps.values())


def earliest_wrong(derivation: Derivation, verdicts: list[ClaimVerdict]) -> list[int]:
    """Numbers of the wrong claims that depend on no other wrong claim."""
    wrong = [v for v in verdicts if v.outcome == DIFFERS]
    extra = tuple(s for s in audit_steps(verdicts) if s.id not in {t.id for t in derivation.steps})
    if extra:
        derivation = derivation.with_steps(extra, {})
    before = ancestors(derivation)
    roots = []
    for v in wrong:
        upstream = _upstream(derivation, before, v)
        here = _position(v)
        if not any(_position(o) & upstream for o in wrong if o is not v and _position(o) != here):
            roots.append(v.claim.number)
    return roots


def audit(derivation: Derivation, claims: list[Claim]) -> tuple[list[ClaimVerdict], list[int]]:
    auditor = Auditor(derivation)
    verdicts = [auditor.check(c) for c in claims]
    return verdicts, earliest_wrong(derivation, verdicts)


def record_audit(derivation: Derivation, title: str, verdicts: list[ClaimVerdict], earliest: list[int]) -> Derivation:
    """A new derivation: this one with a step per claim and an ``audit`` entry in the results."""
    rows = []
    steps = [s for s in audit_steps(verdicts) if s.id not in {t.id for t in derivation.steps}]
    for v in verdicts:
        c = v.claim
        holds = {AGREES: True, DIFFERS: False}.get(v.outcome)
        evidence = v.evidence + (f"; {v.diagnosis}" if v.diagnosis else "")
        if c.number in earliest:
            evidence += "; this is the earliest wrong claim along the chain of steps"
        params = {"number": c.number, "label": c.label, "quantity": c.quantity, "component": c.component,
                  "syntax": c.syntax, "text": c.text, "outcome": v.outcome, "diagnosis": v.diagnosis,
                  "earliest_wrong": c.number in earliest}
        if c.indices:
            params["indices"] = c.indices
        if v.slip:
            params["slip"] = dict(v.slip)
        if v.zero_test:
            params["zero_test"] = dict(v.zero_test)
        if v.test:
            params["test"] = dict(v.test)
        if v.solution:
            params["solution"] = dict(v.solution)
        if c.problem and c.expr is None:
            params["problem"] = c.problem
        if c.expr is not None:
            params["claimed"] = printer_stable(c.expr)
        if v.correct is not None:
            params["correct"] = v.correct
        if v.difference is not None:
            params["difference"] = v.difference
        if v.constants:
            params["constants"] = dict(v.constants)
        steps.append(Step(
            id=f"claim/{c.number}", kind="claim", stage="audit", quantity=c.quantity, component=c.component,
            annotation=f"{c.name[0].upper()}{c.name[1:]}" + (f", {c.label}" if c.label else "") + f": {v.outcome}.",
            formula=r"X_{\text{claimed}} - X_{\text{derived}} = 0", uses=(v.checked_against,),
            result=Verdict(f"{c.name} agrees with the derivation", holds, evidence), params=params))
        rows.append({"number": c.number, "label": c.label, "quantity": c.quantity, "component": c.component,
                     **({"indices": c.indices} if c.indices else {}),
                     "syntax": c.syntax, "text": c.text, "outcome": v.outcome, "diagnosis": v.diagnosis,
                     **({"slip": dict(v.slip)} if v.slip else {}),
                     "evidence": v.evidence, "checked_against": v.checked_against,
                     **({"claimed": printer_stable(c.expr)} if c.expr is not None else {}),
                     **({"correct": v.correct} if v.correct is not None else {}),
                     **({"difference": v.difference} if v.difference is not None else {})})
    return derivation.with_steps(tuple(steps), {"audit": {
        "title": title,
        "all_agree": all(v.outcome == AGREES for v in verdicts),
        "earliest_wrong": earliest,
        "claims": rows,
    }})
