"""What a LaTeX report shows, computed from the trace alone.

:func:`report_model` turns a :class:`~stepper.chain.Derivation` into plain
data for the templates: the metric and its declarations, the conventions,
one entry per step (number, anchor, annotation, formulas, results as LaTeX,
simplifications, links to the steps it used), the closing summary and the
list of checks.  It only reads recorded results; it never recomputes.
"""

from __future__ import annotations

import re
from typing import Any

import sympy

from .chain import Derivation
from .latex import ExpressionWriter, component_symbol, escape_text, mapping_lines
from .tracer import Step, Verdict

#: Step results that are dictionaries of components, with the quantity that names their symbols.
MAPPING_QUANTITIES = {
    "metric": "metric",
    "metric_derivatives": "metric_derivatives",
    "inverse_metric": "inverse_metric",
    "riemann_lowered": "riemann_lowered",
    "weyl": "weyl",
    "ricci_by_trace_identity": "ricci_by_trace_identity",
}

VERDICT_LABELS = {
    "ricci_flat": "Ricci-flat",
    "einstein_space": "Einstein manifold",
    "constant_curvature": "Constant curvature",
    "conformally_flat": "Conformally flat",
    "bianchi": "Contracted Bianchi identity",
}

_LONG_WORD = re.compile(r"\S{25,}")


def breakable_text(text: str) -> str:
    """Escaped text in which long unbroken runs (printed expressions) may break."""
    escaped = escape_text(text)

    def soften(match: re.Match) -> str:
        return re.sub(r"([*+,(=/])", r"\1\\allowbreak{}", match.group())
    return _LONG_WORD.sub(soften, escaped)


def _id_text(step_id: str) -> str:
    return escape_text(step_id)


def _verdict_word(holds: bool | None) -> str:
    return {True: "holds", False: "does not hold", None: "not decided"}[holds]


class _Model:
    def __init__(self, derivation: Derivation):
        self.d = derivation
        m = derivation.metric
        self.writer = ExpressionWriter(m.abbreviations, m.coordinates)
        self.number = {s.id: n for n, s in enumerate(derivation.steps, start=1)}
        self.formula_first_shown: dict[str, int] = {}

    def anchor(self, step_id: str) -> str:
        return f"step{self.number[step_id]}"

    def link(self, step_id: str) -> dict:
        return {"anchor": self.anchor(step_id), "number": self.number[step_id], "id": _id_text(step_id)}

    def equations_for(self, step: Step) -> list[dict]:
        result = step.result
        if isinstance(result, Verdict) or result is None:
            return []
        if step.kind == "component":
            quantity = step.params["quantity"]
            lhs = component_symbol(quantity, step.params["indices"].split(","), self.writer)
            tex, long = self.writer.equation(lhs, result)
            return [{"tex": tex, "long": long}]
        if step.kind == "identity":
            name = self.writer.symbol(step.params["index"])
            rows = [(rf"\Gamma^l_{{l{name}}}", result["sum"]),
                    (rf"\frac{{\partial_{{{name}}} g}}{{2g}}", result["from_determinant"])]
            return [dict(zip(("tex", "long"), self.writer.equation(lhs, value))) for lhs, value in rows]
        if isinstance(result, dict):
            quantity = MAPPING_QUANTITIES.get(step.id)
            if quantity is None:
                return []
            return [{"tex": tex, "long": long} for tex, long in mapping_lines(result, quantity, self.writer)]
        lhs = {"determinant": "g", "scalar": "R", "kretschmann": "K"}.get(step.id, escape_text(step.id))
        tex, long = self.writer.equation(lhs, result)
        return [{"tex": tex, "long": long}]

    def simplifications_for(self, step: Step) -> list[dict]:
        out = []
        for s in step.simplifications:
            before = None
            if s.before is not None:
                text = self.writer.inline(s.before)
                before = {"tex": self.writer.breakable(s.before) if len(text) > 90 else text, "long": len(text) > 90}
            out.append({"rewrite": escape_text(s.rewrite), "before": before, "before_terms": s.before_size})
        return out

    def annotation(self, step: Step) -> str:
        """Component steps get their symbol typeset; other annotations are escaped text."""
        if step.kind != "component":
            return escape_text(step.annotation)
        quantity = step.params["quantity"]
        names = step.params["indices"].split(",")
        symbol = component_symbol(quantity, names, self.writer)
        title = {"christoffel": "Christoffel symbol", "riemann": "Riemann component",
                 "ricci": "Ricci component", "einstein": "Einstein component"}[quantity]
        twin = None
        if quantity == "christoffel" and names[1] != names[2]:
            twin = component_symbol(quantity, [names[0], names[2], names[1]], self.writer)
        elif quantity == "riemann":
            twin = "-" + component_symbol(quantity, [names[0], names[1], names[3], names[2]], self.writer)
        elif quantity in ("ricci", "einstein") and names[0] != names[1]:
            twin = component_symbol(quantity, [names[1], names[0]], self.writer)
        how = " by contracting the Riemann tensor" if quantity == "ricci" else ""
        return rf"{title} \({symbol}\){how}" + (rf" (\(= {twin}\))" if twin else "") + "."

    def step_entry(self, step: Step) -> dict:
        shown_before = self.formula_first_shown.get(step.formula)
        if shown_before is None:
            self.formula_first_shown[step.formula] = self.number[step.id]
        verdict = None
        if isinstance(step.result, Verdict):
            verdict = {"statement": escape_text(step.result.statement), "word": _verdict_word(step.result.holds),
                       "holds": step.result.holds, "evidence": breakable_text(step.result.evidence)}
        return {
            "number": self.number[step.id],
            "anchor": self.anchor(step.id),
            "id": _id_text(step.id),
            "kind": step.kind,
            "annotation": self.annotation(step),
            "formula": step.formula,
            "formula_seen_at": None if shown_before is None else {"anchor": f"step{shown_before}", "number": shown_before},
            "substituted": step.substituted,
            "equations": [] if step.kind == "summary" else self.equations_for(step),
            "simplifications": self.simplifications_for(step) if step.kind != "summary" else [],
            "uses": [self.link(u) for u in step.uses],
            "verdict": verdict,
            "params": {k: escape_text(str(v)) for k, v in step.params.items()
                       if k in ("method", "convention") and isinstance(v, str)},
        }

    def metric_section(self) -> dict:
        m = self.d.metric
        w = self.writer
        assumptions = dict(m.assumptions)
        return {
            "title": escape_text(m.title),
            "notes": escape_text(m.notes) if m.notes else "",
            "dimension": m.dimension,
            "coordinates": [w.symbol(n) for n in m.names],
            "coordinate_names": [escape_text(n) for n in m.names],
            "symbols": [{"tex": w.symbol(name), "name": escape_text(name), "assumption": escape_text(word)}
                        for name, word in assumptions.items()],
            "functions": [{"tex": w.symbol(f.func.__name__),
                           "arguments": ", ".join(w.symbol(a.name) for a in f.args)} for f in m.functions],
            "abbreviations": [{"tex": w.definition(name, value)} for name, value in m.abbreviations],
            "line_element": breakable_text(m.line_element) if m.line_element else "",
            "components": [{"tex": tex, "long": long}
                           for tex, long in mapping_lines(self.d.results["metric"], "metric", w)],
            "arithmetic": escape_text(self.d.arithmetic_description),
        }

    def summary(self) -> dict:
        r = self.d.results
        w = self.writer
        rows = []
        for lhs, key in (("R", "scalar"), ("K", "kretschmann")):
            if key in r:
                tex, long = w.equation(lhs, r[key])
                rows.append({"tex": tex, "long": long})
        verdicts = [{"label": VERDICT_LABELS.get(k, escape_text(k)), "word": _verdict_word(v["holds"]),
                     "holds": v["holds"], "evidence": breakable_text(v["evidence"]),
                     "link": self.link(f"verdict/{k}")}
                    for k, v in r.get("verdicts", {}).items()]
        counts = []
        for quantity, label in (("christoffel", r"Christoffel symbols \(\Gamma^a_{bc}\)"),
                                ("riemann", r"Riemann components \(R^a{}_{bcd}\)"),
                                ("ricci", r"Ricci components \(R_{ij}\)"), ("einstein", r"Einstein components \(G_{ij}\)"),
                                ("weyl", r"independent Weyl components \(C_{abcd}\)")):
            if quantity in r:
                counts.append({"label": label, "count": len(r[quantity])})
        numeric = r.get("numeric_verification")
        numeric_line = None
        if numeric:
            numeric_line = {
                "word": {True: "passed", False: "FAILED", None: "not done"}[numeric["passed"]],
                "deviations": ", ".join(f"{escape_text(q)} {escape_text(v)}" for q, v in numeric["deviations"].items()),
                "points": len(numeric["points"]), "digits": numeric["digits"],
                "tolerance": escape_text(numeric["tolerance"]), "link": self.link("numeric_verification")}
        return {"equations": rows, "verdicts": verdicts, "counts": counts, "numeric": numeric_line}

    def audit(self) -> dict | None:
        """Each claim with its verdict, the values involved and a link to the step it was checked against."""
        report = self.d.results.get("audit")
        if not report:
            return None
        w = self.writer
        rows = []
        plain_evidence = {row["number"]: row["evidence"] for row in report["claims"]}
        for step in self.d.steps:
            if step.kind != "claim":
                continue
            p = step.params
            def tex(key):
                if key not in p:
                    return None
                line, long = w.equation("", p[key])
                return {"tex": line[3:] if line.startswith(" = ") else line, "long": long}
            rows.append({
                "anchor": self.anchor(step.id), "number": p["number"], "label": escape_text(p["label"]),
                "what": escape_text(p["quantity"].replace("_", " ") + (f" {p['component']}" if p["component"] else "")),
                "syntax": escape_text(p["syntax"]), "text": breakable_text(p["text"]),
                "outcome": escape_text(p["outcome"]), "agrees": p["outcome"] == "agrees",
                "diagnosis": escape_text(p["diagnosis"]), "evidence": breakable_text(plain_evidence[p["number"]]),
                "claimed": tex("claimed"), "correct": tex("correct"), "difference": tex("difference"),
                "checked": self.link(step.uses[0]), "earliest": p["earliest_wrong"]})
        return {"title": escape_text(report["title"]), "claims": rows,
                "all_agree": report["all_agree"], "earliest": report["earliest_wrong"],
                "agreed": sum(1 for r in rows if r["agrees"])}

    def checks(self) -> list[dict]:
        out = []
        for step in self.d.steps:
            if isinstance(step.result, Verdict):
                out.append({"link": self.link(step.id), "statement": escape_text(step.result.statement),
                            "word": _verdict_word(step.result.holds), "holds": step.result.holds,
                            "evidence": breakable_text(step.result.evidence)})
        return out


def report_model(derivation: Derivation) -> dict[str, Any]:
    """Plain data for the report templates."""
    model = _Model(derivation)
    return {
        "metric": model.metric_section(),
        "conventions": [{"name": k, "text": v} for k, v in derivation.conventions_latex.items()],
        "steps": [model.step_entry(s) for s in derivation.steps if s.kind != "claim"],
        "audit": model.audit(),
        "summary": model.summary(),
        "checks": model.checks(),
    }
