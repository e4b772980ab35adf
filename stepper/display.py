"""Typeset math for Jupyter: what a derivation, a step, one quantity's components and a verdict show.

The record's classes (:class:`~stepper.record.Derivation`, :class:`~stepper.record.Step`,
:class:`~stepper.record.Verdict`) call into this module lazily from their ``_repr_latex_`` methods;
:meth:`Derivation.quantity` returns a :class:`Components` and :meth:`Derivation.verdict` a
:class:`VerdictView`, both of which display themselves the same way.

Exporter side: everything here reads the record only and typesets it from its fields (expressions with
:class:`stepper.latex.ExpressionWriter`, symbols from the registry in :mod:`stepper.quantities`, the
evidence from a step's ``params``), never from the evidence sentences.  The LaTeX is one display,
``$$\\begin{array}{l} ... \\end{array}$$``, in which words are ``\\text{...}`` holding only characters that
MathJax and KaTeX print as they are, so that Jupyter's ``text/latex`` renderer shows it whole.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any, Iterator

import sympy

from .latex import ExpressionWriter, component_symbol, frame_index, has_component_symbol, without_invisible
from .quantities import QUANTITIES, VERDICTS
from .record import CONDITION_WORDS, HOLDS_WORDS, Derivation, Step, Verdict

#: Characters that are not printed as they are inside \text{...}, and what stands for them (in math).
_TEXT_SPECIALS = {"\\": r"\backslash", "{": r"\{", "}": r"\}", "$": r"\$", "&": r"\&", "%": r"\%", "#": r"\#",
                  "^": r"\hat{}", "_": r"\_", "~": r"\sim"}


def words(text: str) -> str:
    """Text as math-mode LaTeX that prints it literally: ``\\text{...}`` runs with the characters TeX treats
    specially set in math, invisible and control characters removed."""
    out, run = [], []
    for character in without_invisible(str(text)):
        if character in _TEXT_SPECIALS:
            if run:
                out.append(r"\text{" + "".join(run) + "}")
                run = []
            out.append(_TEXT_SPECIALS[character])
        elif character in "\n\t\r":
            run.append(" ")
        else:
            run.append(character)
    if run:
        out.append(r"\text{" + "".join(run) + "}")
    return "".join(out)


def bold(text: str) -> str:
    return r"\textbf{" + "".join(c for c in without_invisible(str(text)) if c.isalnum() or c in " -'") + "}"


def block(rows: list[str]) -> str:
    """Rows of math as one display for Jupyter's text/latex output."""
    return "$$\\begin{array}{l}\n" + " \\\\[3pt]\n".join(r"\displaystyle " + row for row in rows) + "\n\\end{array}$$"


def writer_for(derivation: Derivation) -> ExpressionWriter:
    """The report's writer for this derivation (abbreviations, dots for time derivatives, velocities)."""
    return _model(derivation).writer


def _model(derivation: Derivation):
    from .report import _Model  # the report's typesetting of the same record
    return _Model(derivation)


def _error(message: str) -> Exception:
    from .errors import InputError
    return InputError(message)


# ---------------------------------------------------------------------------
# one quantity's components
# ---------------------------------------------------------------------------

class Components(Mapping):
    """The recorded components of one quantity: a read-only mapping from component keys ("theta,theta"; a
    tuple of coordinate names or symbols works too) to exact sympy expressions; components not listed
    vanish (looking one up gives 0).  A scalar quantity has the one key "".  Shown in Jupyter as
    equations."""

    def __init__(self, derivation: Derivation, name: str) -> None:
        q = QUANTITIES.get(name)
        shown = available_quantities(derivation)
        if q is None or name not in shown:
            why = (f"unknown quantity {name!r}" if q is None else
                   f"this derivation has no {q.words} (see the metric file's requests)")
            raise _error(f"{why}; the derivation holds {', '.join(shown)}")
        value = derivation.results[q.key]
        self.name = name
        self.derivation = derivation
        self.scalar = not isinstance(value, Mapping)
        self._values: dict[str, sympy.Expr] = {"": value} if self.scalar else dict(value)

    def _key(self, key) -> str:
        if isinstance(key, (tuple, list)):
            key = ",".join(getattr(part, "name", str(part)) for part in key)
        if not isinstance(key, str):
            raise KeyError(key)
        return ",".join(part.strip() for part in key.split(",")) if key else key

    def __getitem__(self, key) -> sympy.Expr:
        key = self._key(key)
        if key in self._values:
            return self._values[key]
        names = self.derivation.metric.names
        parts = key.split(",") if key else []
        if not self.scalar and len(parts) == QUANTITIES[self.name].rank and all(p in names for p in parts):
            return sympy.Integer(0)
        raise KeyError(key)

    def __iter__(self) -> Iterator[str]:
        return iter(self._values)

    def __len__(self) -> int:
        return len(self._values)

    def __repr__(self) -> str:
        return f"<{QUANTITIES[self.name].words}: {dict(self._values)!r}>"

    def _repr_latex_(self) -> str:
        return quantity_latex(self.derivation, self.name, self._values, self.scalar)


def available_quantities(derivation: Derivation) -> list[str]:
    """Registry quantities whose recorded results are an expression or a table of expressions."""
    out = []
    for name, q in QUANTITIES.items():
        value = derivation.results.get(q.key)
        if isinstance(value, sympy.Basic) and q.rank == 0:
            out.append(name)
        elif (isinstance(value, Mapping) and q.rank > 0 and has_component_symbol(name)
              and all(isinstance(v, sympy.Basic) for v in value.values())):
            out.append(name)
    return out


def quantity_latex(derivation: Derivation, name: str, values: Mapping[str, sympy.Expr], scalar: bool) -> str:
    q = QUANTITIES[name]
    w = writer_for(derivation)
    if scalar:
        return block([words(q.words.capitalize()), f"{q.symbol} = {w.inline(values[''])}"])
    rows = [words(f"{q.words.capitalize()} (components not listed vanish)")]
    rows += [f"{component_symbol(name, key.split(','), w)} = {w.inline(value)}" for key, value in values.items()]
    if not values:
        rows.append(words("every component vanishes"))
    return block(rows)


# ---------------------------------------------------------------------------
# verdicts
# ---------------------------------------------------------------------------

def verdict_steps(derivation: Derivation) -> list[Step]:
    return [s for s in derivation.steps if isinstance(s.result, Verdict)]


def find_verdict(derivation: Derivation, name) -> "VerdictView":
    """The verdict named ``name``: a registry verdict ("ricci_flat"), an energy condition ("null"), or a
    claim of an audit by its number (4 or "claim 4")."""
    if isinstance(name, int) and not isinstance(name, bool):
        name = f"claim {name}"
    for step in verdict_steps(derivation):
        if name in _names(step):
            return VerdictView(derivation, step)
    known = [_names(s)[0] for s in verdict_steps(derivation)]
    raise _error(f"no verdict {name!r} in this derivation; it holds {', '.join(known)}")


def _names(step: Step) -> tuple[str, ...]:
    if step.kind == "claim":
        return (f"claim {step.params.get('number')}",)
    if step.kind == "energy condition":
        return (step.component, f"{step.component} energy condition")
    if step.kind == "verdict" and step.quantity:
        return (step.quantity, step.id)
    return (step.id,)


class VerdictView:
    """A verdict of a derivation with the step that decided it: ``holds`` (True, False or None when
    undecided), ``step`` and ``verdict`` (the record's), shown in Jupyter as its statement, the answer and
    the evidence typeset from the step's data."""

    def __init__(self, derivation: Derivation, step: Step) -> None:
        self.derivation = derivation
        self.step = step
        self.verdict = step.result
        self.holds = step.result.holds

    def __repr__(self) -> str:
        return f"<verdict {_names(self.step)[0]}: {HOLDS_WORDS[self.holds]}>"

    def _repr_latex_(self) -> str:
        return block(verdict_rows(self.derivation, self.step))


def verdict_rows(derivation: Derivation, step: Step) -> list[str]:
    m = _model(derivation)
    w = m.writer
    p, holds = step.params, step.result.holds
    if step.kind == "claim":
        return claim_rows(m, step)
    if step.kind == "energy condition":
        rows = [words(f"{step.component.capitalize()} energy condition: ") + bold(CONDITION_WORDS[holds])]
        for label, row in p.get("inequalities", {}).items():
            outcome = m.outcome_parts(row)[0]
            rows.append(rf"{m.inequality_tex(label)} \quad {words('with value ')}{w.inline(row['value'])}"
                        rf"\quad {bold(outcome)}")
        return rows
    kind = VERDICTS.get(step.quantity)
    head = words(f"{kind.label}: ") + kind.formula if kind else words(f"{step.quantity or step.id}: ")
    rows = [head + r" \quad " + bold(HOLDS_WORDS[holds])]
    residue = p.get("residue")
    if isinstance(residue, Mapping) and "kind" in residue and "value" in residue and holds is False:
        rows.append(rf"{m.verdict_residue_tex(residue['kind'], residue['component'])} = "
                    rf"{w.inline(residue['value'])} \neq 0")
    elif isinstance(residue, Mapping) and "frame_indices" in residue:
        a, b = residue["frame_indices"]
        rows.append((f"T_{{{frame_index(a, w)}{frame_index(b, w)}}}" if residue["kind"] == "off-diagonal" else
                     f"{component_symbol('pressure', [a], w)} - {component_symbol('pressure', [b], w)}") + r" \neq 0")
    for shown in p.get("undecided", [])[:1]:
        rows.append(m.verdict_residue_tex(shown["kind"], shown["component"]) + r" \quad "
                    + words("not proven zero symbolically"))
    if "trace" in p:
        rows.append(rf"T^i{{}}_i = {w.inline(p['trace'])}")
    if "lambda" in p:
        rows.append(rf"\lambda = R/{derivation.metric.dimension} = {w.inline(p['lambda'])}")
    if "k" in p:
        rows.append(rf"k = {w.inline(p['k'])}")
    fluid = p.get("fluid")
    if isinstance(fluid, Mapping) and "density" in fluid:
        rows.append(rf"\rho = {w.inline(fluid['density'])}, \quad p = {w.inline(fluid.get('pressure', 0))}")
    if holds and "checked" in p:
        rows.append(words(f"each of the {p['checked']} components checked vanishes"))
    return rows


def claim_rows(m, step: Step) -> list[str]:
    p, w = step.params, m.writer
    symbol = m.claim_symbol(p.get("quantity", ""), p.get("component", ""), p.get("indices", ""))
    lhs = symbol + " = " if symbol else ""
    head = words(f"Claim {p.get('number')}") + (words(f" ({p['label']})") if p.get("label") else "")
    rows = [head + words(": ") + bold(p.get("outcome", HOLDS_WORDS[step.result.holds]))]
    if "claimed" in p:
        rows.append(words("claimed: ") + lhs + w.inline(p["claimed"]))
    if "correct" in p and p.get("outcome") != "agrees":
        rows.append(words("correct: ") + lhs + w.inline(p["correct"]))
    if p.get("earliest_wrong"):
        rows.append(words("the earliest wrong claim along the chain of steps"))
    return rows


def verdict_latex(verdict: Verdict) -> str:
    """A verdict without its derivation: the recorded statement and the answer."""
    return block([words(verdict.statement) + r" \quad " + bold(HOLDS_WORDS[verdict.holds])])


# ---------------------------------------------------------------------------
# steps and derivations
# ---------------------------------------------------------------------------

def step_latex(step: Step, derivation: Derivation | None = None) -> str:
    """A step: its id and kind, the general formula, the formula with this metric's quantities, and the
    result typeset from the step's fields."""
    w = writer_for(derivation) if derivation is not None else ExpressionWriter()
    rows = [words(f"Step {step.id} ({step.kind.value})")]
    if step.formula:
        rows.append(step.formula)
    if step.substituted:
        rows.append(step.substituted)
    rows += result_rows(step, w)
    if step.uses:
        rows.append(words("uses: " + ", ".join(step.uses)))
    return block(rows)


def result_rows(step: Step, w: ExpressionWriter) -> list[str]:
    result = step.result
    if isinstance(result, Verdict):
        kind = VERDICTS.get(step.quantity)
        label = kind.label if kind else (step.component or step.quantity or step.id)
        word = (CONDITION_WORDS if step.kind == "energy condition" else HOLDS_WORDS)[result.holds]
        return [words(f"{label}: ") + bold(word)]
    if isinstance(result, sympy.Basic) and step.quantity in QUANTITIES:
        if step.component and has_component_symbol(step.quantity):
            lhs = component_symbol(step.quantity, step.component.split(","), w, step.params.get("positions", ""))
        else:
            lhs = QUANTITIES[step.quantity].symbol
        return [f"{lhs} = {w.inline(result)}"]
    if isinstance(result, sympy.Basic):
        return [w.inline(result)]
    if (isinstance(result, Mapping) and step.quantity in QUANTITIES and not step.component
            and has_component_symbol(step.quantity) and all(isinstance(v, sympy.Basic) for v in result.values())):
        return [f"{component_symbol(step.quantity, key.split(','), w)} = {w.inline(v)}" for key, v in result.items()]
    return []


def derivation_latex(derivation: Derivation) -> str:
    """A derivation at a glance: the metric, the scalar invariants, every verdict and the audit."""
    m = derivation.metric
    w = writer_for(derivation)
    r = derivation.results
    rows = [words(m.title) + r"\quad " + words(f"({m.dimension} dimensions; coordinates ")
            + ", ".join(w.symbol(n) for n in m.names) + words(")")]
    names = m.names
    for key, value in r.get("metric", {}).items():
        i, j = key.split(",")
        if names.index(i) <= names.index(j):
            rows.append(f"{component_symbol('metric', [i, j], w)} = {w.inline(value)}")
    for name in ("scalar", "kretschmann"):
        if isinstance(r.get(name), sympy.Basic):
            rows.append(f"{QUANTITIES[name].symbol} = {w.inline(r[name])}")
    for step in verdict_steps(derivation):
        if step.kind == "claim":
            continue
        kind = VERDICTS.get(step.quantity)
        if step.kind == "energy condition":
            rows.append(words(f"{step.component.capitalize()} energy condition: ")
                        + bold(CONDITION_WORDS[step.result.holds]))
        elif kind:
            rows.append(words(f"{kind.label}: ") + bold(HOLDS_WORDS[step.result.holds]))
    audit: Any = r.get("audit")
    if isinstance(audit, Mapping) and "claims" in audit:
        agreed = sum(1 for row in audit["claims"] if row.get("outcome") == "agrees")
        text = f"Audit: {agreed} of {len(audit['claims'])} claims agree"
        if audit.get("earliest_wrong"):
            text += "; earliest wrong claim " + ", ".join(str(n) for n in audit["earliest_wrong"])
        rows.append(words(text))
    rows.append(words(f"{len(derivation.steps)} recorded steps"))
    return block(rows)


class StepView:
    """A step with its derivation, typeset with the derivation's abbreviations and notation."""

    def __init__(self, derivation: Derivation, step: Step) -> None:
        self.derivation = derivation
        self.step = step

    def __repr__(self) -> str:
        return f"<step {self.step.id} ({self.step.kind.value})>"

    def _repr_latex_(self) -> str:
        return step_latex(self.step, self.derivation)
