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
from dataclasses import dataclass

import sympy
from sympy.core.function import AppliedUndef

from .algebra import choose_arithmetic, printer_stable
from .chain import canonical_lowered
from .record import Derivation
from .claims import Claim
from .quantities import QUANTITIES, claimable
from .record import Step, Verdict

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

    def arithmetic_for(self, *expressions: sympy.Expr):
        coordinates = set(self.m.coordinates)
        known = list(self.m.parameters) + [s for s in getattr(self.m, "extra_symbols", ()) if s not in self.m.parameters]
        extra = sorted({s for e in expressions for s in e.free_symbols
                        if s not in coordinates and s not in known}, key=lambda s: s.name)
        return choose_arithmetic(self.m.coordinates, list(self.m.matrix) + list(expressions), tuple(known) + tuple(extra))

    def vanishes(self, expr: sympy.Expr) -> tuple[bool | None, str]:
        expr = expr.xreplace({sympy.pi: PI})
        A = self.arithmetic_for(expr)
        test = A.zero_test(A.from_expr(expr))
        return test.vanishes, test.evidence

    def simplified(self, expr: sympy.Expr) -> sympy.Expr:
        expr = expr.xreplace({sympy.pi: PI})
        A = self.arithmetic_for(expr)
        return A.to_expr(A.from_expr(expr)).xreplace({PI: sympy.pi})

    def check(self, claim: Claim) -> ClaimVerdict:
        component = "" if QUANTITIES[claim.quantity].rank == 0 else claim.component
        correct, step_id = correct_value(self.d, claim.quantity, component)
        missing = unavailable(self.d, claim.quantity, component)
        if missing:
            return ClaimVerdict(claim, UNDECIDED, step_id, None, None, "", missing)
        if claim.expr is None:
            return ClaimVerdict(claim, UNREADABLE, step_id, correct, None, "",
                                f"the claimed value could not be read: {claim.problem}")
        if claim.quantity == "ansatz_solution":
            return self.check_solution(claim, correct, step_id)
        difference = claim.expr - correct
        zero, evidence = self.vanishes(difference)
        if zero is True:
            return ClaimVerdict(claim, AGREES, step_id, correct, sympy.Integer(0), "", f"the difference: {evidence}")
        if zero is None:
            return ClaimVerdict(claim, UNDECIDED, step_id, correct, self.simplified(difference), "",
                                f"the difference: {evidence}")
        return ClaimVerdict(claim, DIFFERS, step_id, correct, self.simplified(difference),
                            self.diagnose(claim, correct), f"the difference: {evidence}")

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
                                    tuple((c.name, printer_stable(v)) for c, v in assignments.items() if v != c))
        # no values of the constants make them equal
        difference = printer_stable(self.simplified(claim.expr - correct))
        solves, how = self.solves_equation(claim, step_id)
        if solves is True:
            return ClaimVerdict(claim, UNDECIDED, step_id, correct, difference, "",
                                f"the claimed function solves the equation of {step_id} ({how}), but it is not the "
                                f"recorded general solution {name} = {correct} for any values of its constants"
                                + self.fixed_words() + ": another branch or a special solution")
        diagnosis = self.diagnose(claim, correct)
        if self.fitted and not candidates:
            alone = self.fits(general, claim.expr, [dummies[c] for c in constants])
            for values in alone:
                if self.vanishes(claim.expr - general.xreplace(values))[0] is True:
                    diagnosis = ("it is the recorded solution only for constants that contradict an earlier claim"
                                 + self.fixed_words())
                    break
        if solves is False:
            diagnosis += f"; it does not solve the equation of {step_id}" if diagnosis else \
                f"it does not solve the equation of {step_id}"
        return ClaimVerdict(claim, DIFFERS, step_id, correct, difference, diagnosis,
                            f"no values of the integration constants make the recorded solution {name} = {correct} "
                            f"equal to the claim{self.fixed_words()}")

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
        """Does the claimed function solve the equation recorded in the step that solved for it?"""
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
        return zero, evidence

    # slips ----------------------------------------------------------------
    def diagnose(self, claim: Claim, correct: sympy.Expr) -> str:
        claimed = claim.expr
        if self.vanishes(correct)[0]:
            return "the correct value is 0: this component vanishes"
        if self.vanishes(claimed)[0]:
            return "the claim says 0, but this component does not vanish"
        special = self.matter_slip(claim, correct) or self.geodesic_slip(claim, correct)
        if special:
            return special
        ratio = self.simplified(claimed / correct)
        words = self.ratio_words(ratio, claim.quantity)
        if words:
            return words
        swapped = self.swapped_indices(claim)
        if swapped:
            return swapped
        return "no typical slip explains the difference"

    def ratio_words(self, ratio: sympy.Expr, quantity: str) -> str:
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

    def matter_slip(self, claim: Claim, correct: sympy.Expr) -> str:
        """A stress-energy value that is G_ij (or G_ij + Lambda g_ij): the field equations not divided by kappa,
        or the cosmological-constant term left out."""
        q = claim.quantity
        if q not in KAPPA_SCALED:
            return ""
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
        candidates = []
        if self.lam == 0:
            candidates.append((kappa * correct, f"a missing 1/({kappa_words}): the claim is {kappa_words} times "
                                                f"the correct value, i.e. the Einstein tensor component {einstein} "
                                                f"instead of T = {einstein}/({kappa_words})"))
        else:
            candidates.append((kappa * correct, f"a missing 1/({kappa_words}): the claim is {kappa_words} times the "
                                                f"correct value, i.e. {einstein} + Lambda g instead of "
                                                f"T = ({einstein} + Lambda g)/({kappa_words})"))
            if metric_part is not None:
                candidates.append((kappa * correct - self.lam * metric_part,
                                   f"the claim is the Einstein tensor component {einstein}: both the factor "
                                   f"1/({kappa_words}) and the cosmological-constant term Lambda g are missing"))
                candidates.append((correct - self.lam * metric_part / kappa,
                                   f"the cosmological-constant term is missing: the claim is {einstein}/({kappa_words}) "
                                   f"instead of ({einstein} + Lambda g)/({kappa_words}) (the field equations are "
                                   "G + Lambda g = kappa T)"))
        candidates.append((correct / kappa, f"divided by {kappa_words} once too often: the claim is the correct "
                                            f"value divided by {kappa_words}"))
        for value, words in candidates:
            if self.vanishes(claim.expr - value)[0] is True:
                return words
        return ""

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

    def geodesic_slip(self, claim: Claim, correct: sympy.Expr) -> str:
        """The cross terms Gamma^a_bc u^b u^c (b != c) counted once instead of twice."""
        if claim.quantity != "geodesic_acceleration":
            return ""
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
                    "counts each twice (Gamma^a_bc = Gamma^a_cb)")
        if self.vanishes(claim.expr + once)[0] is True and self.vanishes(once - correct)[0] is False:
            return ("the cross terms with b != c are counted once and the overall minus sign is lost")
        return ""

    def swapped_indices(self, claim: Claim) -> str:
        if claim.quantity in ("pressure", "geodesic_acceleration"):
            return self.other_direction(claim)
        parts = claim.component.split(",")
        if len(parts) < 2:
            return ""
        for order in itertools.permutations(range(len(parts))):
            other = [parts[i] for i in order]
            if other == parts:
                continue
            value, _ = correct_value(self.d, claim.quantity, ",".join(other))
            if self.vanishes(claim.expr - value)[0]:
                return (f"swapped indices: the claim equals the component ({','.join(other)}) "
                        f"rather than ({claim.component})")
        return ""

    def other_direction(self, claim: Claim) -> str:
        """A pressure or acceleration that belongs to another direction."""
        table = self.d.results.get(QUANTITIES[claim.quantity].key, {})
        for name, value in table.items():
            if name == claim.component or self.vanishes(value)[0]:
                continue
            if self.vanishes(claim.expr - value)[0] is True:
                return f"the claim is the value for the direction {name}, not {claim.component}"
        if claim.quantity == "pressure" and "energy_density" in self.d.results:
            rho = self.d.results["energy_density"]
            if self.vanishes(claim.expr - rho)[0] is True:
                return "the claim is the energy density rho, not a pressure"
        return ""


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


def _upstream(derivation: Derivation, before: dict[str, set[str]], v: ClaimVerdict) -> set[str]:
    """Every step, and every component of a table step, the claimed value depends on."""
    sources = _sources(derivation, v.claim.quantity, v.claim.component)
    if sources is None:
        return set(before.get(v.checked_against, set()))
    out: set[str] = set()
    for s in sources:
        if "#" in s:  # one component of a table: what that component is built from
            out.add(s)
            step, component = s.split("#", 1)
            inner = _sources(derivation, step, component) if step in ("frame_stress_energy", "frame_ricci") else None
            if inner is None:
                out |= before.get(step, set())
            else:
                for i in inner:
                    out |= _expand(derivation, before, i)
        else:
            out |= _expand(derivation, before, s)
    return out


def earliest_wrong(derivation: Derivation, verdicts: list[ClaimVerdict]) -> list[int]:
    """Numbers of the wrong claims that depend on no other wrong claim."""
    wrong = [v for v in verdicts if v.outcome == DIFFERS]
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
    steps = []
    for v in verdicts:
        c = v.claim
        holds = {AGREES: True, DIFFERS: False}.get(v.outcome)
        evidence = v.evidence + (f"; {v.diagnosis}" if v.diagnosis else "")
        if c.number in earliest:
            evidence += "; this is the earliest wrong claim along the chain of steps"
        params = {"number": c.number, "label": c.label, "quantity": c.quantity, "component": c.component,
                  "syntax": c.syntax, "text": c.text, "outcome": v.outcome, "diagnosis": v.diagnosis,
                  "earliest_wrong": c.number in earliest}
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
                     "syntax": c.syntax, "text": c.text, "outcome": v.outcome, "diagnosis": v.diagnosis,
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
