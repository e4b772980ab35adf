"""Audit claimed results against a derivation, and say where a hand calculation first went wrong.

Each claim is compared exactly with the recorded result it names: the
difference goes through the same exact arithmetic as the derivation (or,
for expressions the field cannot hold, sympy's simplifier and then random
points), so "agrees" and "differs" are proofs and "cannot be decided" says
why.  A wrong claim is diagnosed in words where a typical slip explains it
(a sign, a factor of 2, swapped indices, another sign convention).  Among
the wrong claims, those that depend on no other wrong claim through the
recorded steps are the earliest: where the calculation went astray.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import sympy

from .algebra import choose_arithmetic, printer_stable
from .chain import Derivation, canonical_lowered
from .claims import QUANTITIES, Claim
from .tracer import Step, Verdict

SCALARS = {"determinant", "scalar", "kretschmann"}
AGREES, DIFFERS, UNDECIDED, UNREADABLE = "agrees", "differs", "cannot be decided", "unreadable"


@dataclass(frozen=True)
class ClaimVerdict:
    claim: Claim
    outcome: str
    checked_against: str
    correct: sympy.Expr | None
    difference: sympy.Expr | None
    diagnosis: str
    evidence: str


def correct_value(derivation: Derivation, quantity: str, component: str) -> tuple[sympy.Expr, str]:
    """The recorded value of a component (zero when not listed) and the id of the step that holds it."""
    results = derivation.results
    if quantity in SCALARS:
        return results.get(quantity, sympy.Integer(0)), quantity
    names = derivation.metric.names
    parts = component.split(",")
    index = tuple(names.index(p) for p in parts)
    key = lambda idx: ",".join(names[i] for i in idx)
    table = results.get(quantity, {})
    if quantity in ("riemann_lowered", "weyl"):
        sign, canonical = canonical_lowered(index)
        value = sign * table.get(key(canonical), sympy.Integer(0)) if sign else sympy.Integer(0)
        return printer_stable(value), quantity
    value = table.get(component, sympy.Integer(0))
    step_id = quantity
    if quantity == "christoffel":
        a, b, c = index
        step_id = f"christoffel/{key((a, min(b, c), max(b, c)))}"
    elif quantity == "riemann":
        a, b, c, d = index
        step_id = f"riemann/{key((a, b, min(c, d), max(c, d)))}"
    elif quantity in ("ricci", "einstein"):
        step_id = f"{quantity}/{key(tuple(sorted(index)))}"
    if step_id not in {s.id for s in derivation.steps}:
        step_id = quantity if quantity in {s.id for s in derivation.steps} else "metric"
    return value, step_id


class Auditor:
    """Compares claims with one derivation."""

    def __init__(self, derivation: Derivation):
        self.d = derivation
        self.m = derivation.metric

    def arithmetic_for(self, *expressions: sympy.Expr):
        return choose_arithmetic(self.m.coordinates, list(self.m.matrix) + list(expressions), self.m.parameters)

    def vanishes(self, expr: sympy.Expr) -> tuple[bool | None, str]:
        A = self.arithmetic_for(expr)
        test = A.zero_test(A.from_expr(expr))
        return test.vanishes, test.evidence

    def simplified(self, expr: sympy.Expr) -> sympy.Expr:
        A = self.arithmetic_for(expr)
        return A.to_expr(A.from_expr(expr))

    def check(self, claim: Claim) -> ClaimVerdict:
        if QUANTITIES[claim.quantity] == 0:
            correct, step_id = correct_value(self.d, claim.quantity, "")
        else:
            correct, step_id = correct_value(self.d, claim.quantity, claim.component)
        if claim.quantity not in self.d.results:
            return ClaimVerdict(claim, UNDECIDED, step_id, None, None, "",
                                f"the derivation did not compute the {claim.quantity.replace('_', ' ')} "
                                "(it was run with --skip-invariants)")
        if claim.expr is None:
            return ClaimVerdict(claim, UNREADABLE, step_id, correct, None, "",
                                f"the claimed value could not be read: {claim.problem}")
        difference = claim.expr - correct
        zero, evidence = self.vanishes(difference)
        if zero is True:
            return ClaimVerdict(claim, AGREES, step_id, correct, sympy.Integer(0), "", f"the difference: {evidence}")
        if zero is None:
            return ClaimVerdict(claim, UNDECIDED, step_id, correct, self.simplified(difference), "",
                                f"the difference: {evidence}")
        return ClaimVerdict(claim, DIFFERS, step_id, correct, self.simplified(difference),
                            self.diagnose(claim, correct), f"the difference: {evidence}")

    # slips ----------------------------------------------------------------
    def diagnose(self, claim: Claim, correct: sympy.Expr) -> str:
        claimed = claim.expr
        if self.vanishes(correct)[0]:
            return "the correct value is 0: this component vanishes"
        if self.vanishes(claimed)[0]:
            return "the claim says 0, but this component does not vanish"
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
            return ""
        if ratio == -1:
            base = "a sign flip: the claim is minus the correct value"
            hint = {
                "riemann": "; an overall sign convention for the Riemann tensor opposite to this derivation's "
                           "(R^a_bcd = d_c Gamma^a_db - ...) would explain it",
                "riemann_lowered": "; an overall sign convention for the Riemann tensor opposite to this "
                                   "derivation's would explain it",
                "ricci": "; contracting the Riemann tensor on its last index (R_bd = R^a_bda) instead of the "
                         "third, or the opposite Riemann sign, would explain it",
                "scalar": "; an opposite sign convention for the Riemann or Ricci tensor would explain it",
                "einstein": "; an opposite sign convention for the Riemann or Ricci tensor would explain it",
            }.get(quantity, "")
            return base + hint
        if ratio == 2:
            return "an extra factor of 2: the claim is twice the correct value"
        if ratio == sympy.Rational(1, 2):
            return "a missing factor of 2: the claim is half the correct value (a lost 1/2 is a common cause)"
        if ratio == -2 or ratio == sympy.Rational(-1, 2):
            return f"a sign flip and a factor of 2: the claim is {ratio} times the correct value"
        return f"off by a constant factor: the claim is {ratio} times the correct value"

    def swapped_indices(self, claim: Claim) -> str:
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


def ancestors(derivation: Derivation) -> dict[str, set[str]]:
    """For each step id, every step it depends on, directly or not."""
    uses = {s.id: set(s.uses) for s in derivation.steps}
    out: dict[str, set[str]] = {}
    for step in derivation.steps:  # recorded in dependency order
        found = set(step.uses)
        for used in step.uses:
            found |= out.get(used, set())
        out[step.id] = found
    return out


def earliest_wrong(derivation: Derivation, verdicts: list[ClaimVerdict]) -> list[int]:
    """Numbers of the wrong claims that depend on no other wrong claim."""
    wrong = [v for v in verdicts if v.outcome == DIFFERS]
    before = ancestors(derivation)
    roots = []
    for v in wrong:
        upstream = before.get(v.checked_against, set())
        if not any(o.checked_against in upstream for o in wrong if o is not v and o.checked_against != v.checked_against):
            roots.append(v.claim.number)
    return roots


def audit(derivation: Derivation, claims: list[Claim]) -> tuple[list[ClaimVerdict], list[int]]:
    auditor = Auditor(derivation)
    verdicts = [auditor.check(c) for c in claims]
    return verdicts, earliest_wrong(derivation, verdicts)


def record_audit(derivation: Derivation, title: str, verdicts: list[ClaimVerdict], earliest: list[int]) -> None:
    """Add a step per claim and an ``audit`` entry to the results (the trace then carries them)."""
    rows = []
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
        derivation.steps.append(Step(
            id=f"claim/{c.number}", kind="claim",
            annotation=f"{c.name[0].upper()}{c.name[1:]}" + (f", {c.label}" if c.label else "") + f": {v.outcome}.",
            formula=r"X_{\text{claimed}} - X_{\text{derived}} = 0", uses=(v.checked_against,),
            result=Verdict(f"{c.name} agrees with the derivation", holds, evidence), params=params))
        rows.append({"number": c.number, "label": c.label, "quantity": c.quantity, "component": c.component,
                     "syntax": c.syntax, "text": c.text, "outcome": v.outcome, "diagnosis": v.diagnosis,
                     "evidence": v.evidence, "checked_against": v.checked_against,
                     **({"claimed": printer_stable(c.expr)} if c.expr is not None else {}),
                     **({"correct": v.correct} if v.correct is not None else {}),
                     **({"difference": v.difference} if v.difference is not None else {})})
    derivation.results["audit"] = {
        "title": title,
        "all_agree": all(v.outcome == AGREES for v in verdicts),
        "earliest_wrong": earliest,
        "claims": rows,
    }
