"""What a LaTeX report shows, computed from the trace alone.

:func:`report_model` turns a :class:`~stepper.chain.Derivation` into plain
data for the templates: the metric and its declarations, the conventions,
the steps grouped into sections (the curvature; the matter the metric
requires; the energy conditions; the solution of an ansatz; the geodesic
equations), each step with its number, anchor, annotation, formulas, results
as LaTeX, simplifications and links to the steps it used, then the closing
summary and the list of checks.  It only reads recorded results; it never
recomputes.  Every text that came from an input file is escaped, and nested
results (frame vectors, densities and pressures, reduced equations, solutions,
orbits) are typeset, never printed as Python values.
"""

from __future__ import annotations

import re
from typing import Any

import sympy

from .record import Derivation
from .latex import (SHORT_LATEX, ExpressionWriter, component_symbol, escape_text, frame_index,
                    has_component_symbol, mapping_lines, pdf_string)
from .quantities import QUANTITIES, VERDICTS, position_words
from .record import CONDITION_WORDS, HOLDS_WORDS, Decision, FunctionSign, Method, Step, Verdict

ENERGY_CONDITIONS = ("null", "weak", "strong", "dominant")

SECTION_TITLES = {
    "curvature": "The derivation, step by step",
    "matter": "Matter required by the metric",
    "energy": "Energy conditions",
    "ansatz": "Solving the ansatz",
    "geodesics": "Geodesic equations",
}

#: Typeset annotations of the matter and ansatz steps (the trace keeps the plain-text ones), keyed by the
#: step's (kind, quantity, component).
ANNOTATIONS = {
    ("summary", "stress_energy", ""): r"The stress-energy tensor with both indices down, \(T_{ij}\).",
    ("raising", "stress_energy_mixed", ""): (r"The stress-energy tensor with its first index raised, \(T^i{}_j = g^{ik} T_{kj}\) "
                            r"(components not listed vanish)."),
    ("raising", "stress_energy_up", ""): (r"The stress-energy tensor with both indices raised, \(T^{ij} = g^{ik} g^{jl} T_{kl}\) "
                         r"(components not listed vanish)."),
    ("verdict", "trace_free", ""): (r"Is the stress-energy tensor trace-free, \(T^i{}_i = 0\), as that of an electromagnetic "
                           r"field in four dimensions is?"),
    ("check", "", "frame"): (r"The frame is orthonormal: \(g(e_{(a)}, e_{(b)}) = \eta_{(a)(b)} = "
                    r"\operatorname{diag}(-1, 1, \dots, 1)\)."),
    ("frame components", "frame_stress_energy", ""): (r"The stress-energy tensor in the orthonormal frame, \(T_{(a)(b)}\) (components not "
                            r"listed vanish)."),
    ("frame components", "frame_ricci", ""): r"The Ricci tensor in the orthonormal frame, \(R_{(a)(b)}\) (components not listed vanish).",
    ("frame components", "frame_riemann", ""): (r"The Riemann tensor in the orthonormal frame, \(R_{(a)(b)(c)(d)}\), for \(a < b\), \(c < d\) "
                      r"and \((a, b) \le (c, d)\) in frame order; the others follow from the symmetries of "
                      r"\(R_{abcd}\) (components not listed vanish)."),
    ("verdict", "perfect_fluid", ""): (r"Is the matter a perfect fluid at rest in the frame, "
                              r"\(T_{ij} = (\rho + p)\,u_i u_j + p\,g_{ij}\) with \(u = e_{(0)}\), the 4-velocity of "
                              r"the frame's observers?"),
    ("check", "ansatz_solution", ""): (r"Put the solution into every component \(E_{ij} = G_{ij} + \Lambda g_{ij}\), including the "
                     r"duplicates and those that follow by the Bianchi identity."),
}

#: Typeset statements of the new verdicts, keyed like ANNOTATIONS.
STATEMENTS = {
    ("verdict", "trace_free", ""): r"Trace-free stress-energy, \(T^i{}_i = 0\)",
    ("verdict", "perfect_fluid", ""): r"Perfect fluid at rest in the frame",
    ("check", "", "frame"): r"\(g(e_{(a)}, e_{(b)}) = \eta_{(a)(b)}\)",
    ("check", "ansatz_solution", ""): r"The solution satisfies every field equation \(E_{ij} = 0\)",
}

#: Width (in characters of LaTeX) of an expression shown in a table cell before it is broken.
CELL_WIDTH = 48

#: A declared sign of a free function as a relation, in LaTeX.
_SIGN_TEX = {"positive": "> 0", "nonnegative": r"\ge 0", "negative": "< 0", "nonpositive": r"\le 0",
             "nonzero": r"\ne 0"}

_LONG_WORD = re.compile(r"\S{25,}")


def breakable_text(text: str) -> str:
    """Escaped text in which long unbroken runs (printed expressions) may break."""
    escaped = escape_text(text)

    def soften(match: re.Match) -> str:
        return re.sub(r"([*+,(=/])", r"\1\\allowbreak{}", match.group())
    return _LONG_WORD.sub(soften, escaped)


def fields(step: Step) -> tuple[str, str, str]:
    """What a step is: its (kind, quantity, component)."""
    return step.kind.value, step.quantity, step.component


def _id_text(step_id: str) -> str:
    return escape_text(step_id)


def _verdict_word(holds: bool | None) -> str:
    return HOLDS_WORDS[holds]


def _condition_word(holds: bool | None) -> str:
    return "holds (proven)" if holds else CONDITION_WORDS[holds]


def section_of(step: Step) -> str:
    """Which section of the report a step belongs to: the stage that recorded it."""
    return {"energy conditions": "energy"}.get(step.stage, step.stage)


class _Model:
    def __init__(self, derivation: Derivation):
        self.d = derivation
        m = derivation.metric
        self.number = {s.id: n for n, s in enumerate(derivation.steps, start=1)}
        self.writer = ExpressionWriter(m.abbreviations, m.coordinates)  # velocity_tex needs it for coordinates
        velocities = {x: (sympy.Symbol(self.velocity_name(x), real=True), self.velocity_tex(x)) for x in m.names}
        self.writer = ExpressionWriter(m.abbreviations, m.coordinates, velocities)
        self.formula_first_shown: dict[str, int] = {}

    # small pieces ---------------------------------------------------------
    def anchor(self, step_id: str) -> str:
        return f"step{self.number[step_id]}"

    def link(self, step_id: str) -> dict:
        return {"anchor": self.anchor(step_id), "number": self.number[step_id], "id": _id_text(step_id)}

    def has(self, step_id: str) -> bool:
        return step_id in self.number

    def sym(self, name: str) -> str:
        return self.writer.symbol(name)

    def line(self, tex: str) -> dict:
        """A display line given as LaTeX; long lines go into a ragged paragraph where TeX may break them."""
        return {"tex": tex, "long": len(tex) > SHORT_LATEX}

    @staticmethod
    def pack(lines: list[dict], per_row: int = 3, width: int = 45) -> list[dict]:
        """Short display lines side by side, ``per_row`` to a row, when every one of them is short."""
        if not lines or any(line["long"] or len(line["tex"]) > width for line in lines):
            return lines
        return [{"tex": r",\qquad ".join(line["tex"] for line in lines[k:k + per_row]), "long": False}
                for k in range(0, len(lines), per_row)]

    def eq(self, lhs: str, value: sympy.Expr) -> dict:
        tex, long = self.writer.equation(lhs, value)
        return {"tex": tex, "long": long}

    def value_tex(self, value: sympy.Expr, width: int = SHORT_LATEX) -> str:
        return self.writer.fits(value, width)

    def function_sign_tex(self, sign: FunctionSign) -> str:
        """A declared sign of a free function or of its first derivative, e.g. m'(v) \\ge 0."""
        functions = {f.func.__name__: f for f in self.d.metric.functions}
        f = functions.get(sign.function)
        if f is None:
            target = self.sym(sign.function)
        elif sign.along:
            target = self.writer.inline(sympy.Derivative(f, next(a for a in f.args if a.name == sign.along)))
        else:
            target = self.writer.inline(f)
        return f"{target} {_SIGN_TEX[sign.sign]}"

    def function_tex(self, f: sympy.Expr) -> str:
        """A free function with its arguments, e.g. B(r)."""
        if isinstance(f, sympy.core.function.AppliedUndef):
            return f"{self.sym(f.func.__name__)}({', '.join(self.writer.inline(a) for a in f.args)})"
        return self.writer.inline(f)

    def E(self, key: str) -> str:
        return component_symbol("field_equation", key.split(","), self.writer)

    def vector_tex(self, components: dict, width: int = SHORT_LATEX) -> str:
        """A vector sum_i c^i d_i with its coordinate components."""
        terms = []
        for name, coefficient in components.items():
            d = rf"\partial_{{{self.sym(name)}}}"
            if coefficient == 1:
                terms.append(d)
                continue
            if coefficient == -1:
                terms.append("-" + d)
                continue
            text = self.value_tex(coefficient, width)
            if isinstance(coefficient, sympy.Add):
                text = rf"\bigl({text}\bigr)"
            terms.append(text + r"\," + d)
        out = ""
        for i, term in enumerate(terms):
            if i == 0:
                out = term
            elif term.startswith("-"):
                out += " - " + term[1:]
            else:
                out += " + " + term
        return out or "0"

    def number_tex(self, value: sympy.Expr) -> str:
        """An exact number, typeset, with a three-digit approximation when it is not rational."""
        tex = self.writer.inline(value)
        return tex if value.is_Rational else rf"{tex} \approx {sympy.N(value, 3)}"

    # the formula, substitution and result of a step ----------------------------
    def equations_for(self, step: Step) -> list[dict]:
        result = step.result
        if isinstance(result, Verdict) or result is None:
            if fields(step) == ("verdict", "trace_free", "") and "trace" in step.params:
                return [self.eq(r"T^i{}_i", step.params["trace"])]
            return []
        if step.kind == "component":
            lhs = component_symbol(step.quantity, step.component.split(","), self.writer)
            return [self.eq(lhs, result)]
        if step.kind == "identity":
            name = self.sym(step.component)
            rows = [(rf"\Gamma^l_{{l{name}}}", result["sum"]),
                    (rf"\frac{{\partial_{{{name}}} g}}{{2g}}", result["from_determinant"])]
            return [self.eq(lhs, value) for lhs, value in rows]
        special = {
            ("field equations", "", ""): self.field_equations_lines,
            ("frame", "", ""): self.frame_lines,
            ("matter", "", ""): self.density_lines,
            ("ansatz", "field_equation", "equations"): self.ansatz_equation_lines,
            ("ansatz", "ansatz_solution", ""): self.ansatz_solution_lines,
            ("geodesic", "", ""): self.geodesic_lines,
        }
        if fields(step) in special:
            return special[fields(step)](result)
        if step.kind == "ode solution":
            return self.ode_lines(step)
        if isinstance(result, dict):
            if step.quantity not in QUANTITIES or step.component:  # only a whole table of components
                return []
            return [{"tex": tex, "long": long} for tex, long in mapping_lines(result, step.quantity, self.writer)]
        if self.is_moved(step):
            lhs = component_symbol(step.quantity, step.component.split(","), self.writer, step.params["positions"])
            return [self.eq(lhs, result)]
        lhs = QUANTITIES[step.quantity].symbol if step.quantity in QUANTITIES else escape_text(step.id)
        return [self.eq(lhs, result)]

    def field_equations_lines(self, result: dict) -> list[dict]:
        return [self.eq(r"\kappa", result["kappa"]), self.eq(r"\Lambda", result["cosmological_constant"])]

    def frame_lines(self, result: dict) -> list[dict]:
        lines = []
        norms = result.get("squared_norms", {})
        for label, components in result.get("vectors", {}).items():
            e = rf"e_{frame_index(label, self.writer)} = {self.vector_tex(components)}"
            n = rf"N_{frame_index(label, self.writer)} = {self.value_tex(norms[label])}" if label in norms else ""
            if n and len(e) + len(n) + 8 <= SHORT_LATEX:
                lines.append(self.line(e + r",\qquad " + n))
            else:
                lines += [self.line(e)] + ([self.line(n)] if n else [])
        return self.flush_together(lines)

    def density_lines(self, result: dict) -> list[dict]:
        lines = [self.eq(r"\rho", result["energy_density"])]
        for label, value in result.get("pressures", {}).items():
            lines.append(self.eq(component_symbol("pressure", [label], self.writer), value))
        return lines[:1] + self.pack(lines[1:])

    @staticmethod
    def flush_together(lines: list[dict]) -> list[dict]:
        """All lines of a group left-aligned when one of them is, so that they line up."""
        if any(line["long"] for line in lines):
            return [{"tex": line["tex"], "long": True} for line in lines]
        return lines

    def ansatz_equation_lines(self, result: dict) -> list[dict]:
        return self.flush_together([self.line(rf"({self.E(key)})\qquad " + self.value_tex(value) + " = 0")
                                    for key, value in result.items()])

    def ode_lines(self, step: Step) -> list[dict]:
        r = step.result
        key = step.params.get("component", "")
        tag = rf"({self.E(key)})\qquad " if key else ""
        lines = [self.line(tag + self.value_tex(r["equation"]) + " = 0"),
                 self.eq(self.writer.inline(r["unknown"]), r["solution"])]
        return lines

    def ansatz_solution_lines(self, result: dict) -> list[dict]:
        step = self.d.step("ansatz/solution")
        functions = {str(f): f for f in self.d.metric.functions}
        lines = []
        for name, value in step.params.get("solution", {}).items():
            f = functions.get(name)
            lines.append(self.eq(self.writer.inline(f) if f is not None else escape_text(name), value))
        return self.pack(lines) + [{"tex": tex, "long": long} for tex, long in mapping_lines(result, "metric", self.writer)]

    def velocity_name(self, coordinate: str) -> str:
        """The name the geodesic step recorded for d(coordinate)/dtau: u_r, or uu_r on a clash."""
        for step in self.d.steps:
            if step.kind == "geodesic":
                return str(step.params.get("velocity_symbols", {}).get(coordinate, f"u_{coordinate}"))
        return f"u_{coordinate}"

    def velocity_tex(self, coordinate: str) -> str:
        """LaTeX for d(coordinate)/dtau: u_{r}, or uu_{r} when the metric already used the name u_r;
        the subscript is the coordinate as typeset elsewhere."""
        name = self.velocity_name(coordinate)
        prefix = name[:len(name) - len(coordinate) - 1] if name.endswith("_" + coordinate) else "u"
        return f"{prefix}_{{{self.sym(coordinate)}}}"

    def geodesic_lines(self, result: dict) -> list[dict]:
        lines = []
        positions = result.get("position", {})
        for name, acceleration in result.get("velocity", {}).items():
            x = self.sym(name)
            first = rf"\frac{{d{x}}}{{d\tau}} = {self.velocity_tex(name)},\qquad "
            lhs = component_symbol("geodesic_acceleration", [name], self.writer)
            tex, long = self.writer.equation(lhs, acceleration)
            if long or len(first) + len(tex) > SHORT_LATEX:
                lines.append({"tex": first + tex, "long": True})
            else:
                lines.append(self.line(first + tex))
        return self.flush_together(lines)

    # notes: typeset sentences shown after a step's equations ----------------------
    def notes_for(self, step: Step) -> list[str]:
        notes = []
        r, p = step.result, step.params
        if step.kind == "summary" and isinstance(r, dict) and not r:
            notes.append("Every component vanishes.")
        elif step.kind in ("frame components", "raising") and isinstance(r, dict) and not r:
            notes.append("Every component vanishes.")
        if step.kind == "field equations":
            units = p.get("units", "")
            notes.append("Geometric units, \\(G = c = 1\\)." if units == "geometric" else
                         "Physical units: \\(G\\) and \\(c\\) are kept as symbols." if units == "physical" else "")
        if fields(step) == ("verdict", "perfect_fluid", "") and isinstance(r, Verdict) and r.holds and "fluid" in p:
            notes.append(self.perfect_fluid_sentence(p["fluid"]))
        if fields(step) == ("ansatz", "field_equation", "equations"):
            notes += self.ansatz_equation_notes(p)
        if fields(step) == ("ansatz", "field_equation", "dependence") and isinstance(r, dict):
            notes += self.dependence_notes(r, p)
        if step.kind == "ode solution":
            branches = p.get("other_branches", [])
            if branches:
                shown = ", ".join(rf"\({self.writer.inline(r['unknown'])} = {self.value_tex(b)}\)" for b in branches)
                notes.append(f"Other branches of the solution, not followed: {shown}.")
        if fields(step) == ("ansatz", "ansatz_solution", "") and isinstance(r, dict):
            notes += self.solution_notes(p)
        if step.kind == "geodesic" and "orbit" in p:
            notes.append(self.orbit_sentence(p["orbit"]))
        return [n for n in notes if n]

    def perfect_fluid_sentence(self, fluid: dict) -> str:
        u = self.vector_tex(fluid.get("velocity", {}))
        return (rf"Density \(\rho = {self.value_tex(fluid['density'])}\), pressure "
                rf"\(p = {self.value_tex(fluid['pressure'])}\), 4-velocity \(u = e_{{(0)}} = {u}\).")

    def ansatz_equation_notes(self, p: dict) -> list[str]:
        notes = []
        dropped = p.get("dropped_factors", {})
        if dropped:
            parts = [", ".join(rf"\({self.writer.inline(f)}\)" for f in factors) + rf" from \({self.E(key)}\)"
                     for key, factors in dropped.items()]
            notes.append("Factors removed because they cannot vanish: " + "; ".join(parts) + ".")
        for key, dup in p.get("duplicates", {}).items():
            factor = dup["factor"]
            times = "" if factor == 1 else (rf"\bigl({self.writer.inline(factor)}\bigr)\," if isinstance(factor, sympy.Add)
                                          else self.writer.inline(factor) + r"\,")
            notes.append(rf"\({self.E(key)} = {times}{self.E(dup['of'])}\): the same equation again.")
        zero = p.get("identically_zero", [])
        if zero:
            notes.append("Vanish identically: " + ", ".join(rf"\({self.E(k)}\)" for k in zero) + ".")
        return notes

    def dependence_notes(self, r: dict, p: dict) -> list[str]:
        notes = ["Independent equations: " + ", ".join(rf"\({self.E(k)} = 0\)" for k in r.get("independent", [])) + "."]
        for key, why in r.get("follows", {}).items():
            sources = ", ".join(rf"\({self.E(k)}\)" for k in why["from"])
            notes.append(rf"\({self.E(key)} = 0\) follows from {sources} and their derivatives: component "
                         rf"\({self.sym(why['bianchi_component'])}\) of the identity contains it undifferentiated, "
                         rf"with the coefficient \({self.value_tex(why['coefficient'])}\), which is not zero.")
        relations = p.get("relations", {})
        if relations:
            parts = [rf"\(b = {self.sym(b)}\): " + (", ".join(rf"\({self.E(k)}\)" for k in keys) or "none")
                     for b, keys in relations.items()]
            notes.append("The equations each component of the identity contains: " + "; ".join(parts) + ".")
        return notes

    def solution_notes(self, p: dict) -> list[str]:
        notes = []
        constants = self.d.results.get("ansatz", {}).get("constants", [])
        if constants:
            notes.append("Integration constants: " + ", ".join(rf"\({self.sym(c)}\)" for c in constants) + ".")
        for constant, how in p.get("rescalings", {}).items():
            coordinate, _, rest = how.partition(":")
            if rest and re.fullmatch(r"[A-Za-z][A-Za-z0-9_]*", coordinate.strip()):
                notes.append(rf"\({self.sym(constant)}\) is removed by rescaling \({self.sym(coordinate.strip())}\): "
                             + breakable_text(rest.strip()) + ".")
            else:
                notes.append(rf"\({self.sym(constant)}\): " + breakable_text(how) + ".")
        unsolved = self.d.results.get("ansatz", {}).get("unsolved")
        if unsolved:
            notes.append("Not every unknown is solved: " + breakable_text(unsolved) + ".")
        return notes

    def orbit_sentence(self, orbit: dict) -> str:
        w = self.writer

        def pairs(values: dict, velocity: bool = False) -> str:
            return ", ".join(rf"\({self.velocity_tex(k) if velocity else self.sym(k)} = {w.inline(v)}\)"
                             for k, v in values.items())
        timelike = orbit.get("kind") == "timelike"
        time = orbit.get("time", "")
        u_time = self.velocity_tex(time)
        parts = [f"An orbit for the notebook to integrate numerically: a {escape_text(orbit.get('kind', ''))} geodesic"]
        if orbit.get("values"):
            parts.append("with " + pairs(orbit["values"]))
        text = " ".join(parts) + ", starting at " + pairs(orbit.get("start", {}))
        text += " with " + pairs(orbit.get("velocity", {}), velocity=True)
        text += rf" (\({u_time}\) follows from \(g_{{ab}}\,u^a u^b = {'-1' if timelike else '0'}\))"
        span = orbit.get("span")
        if span is not None:
            parameter = "proper time" if timelike else "affine parameter"
            text += rf", over the {parameter} \(0 \le \tau \le {w.inline(span)}\)"
        return text + "."

    # annotations ---------------------------------------------------------------
    def annotation(self, step: Step) -> str:
        """Component steps get their symbol typeset, the new stages typeset sentences; others escaped text."""
        if step.kind == "component":
            return self.component_annotation(step)
        r = step.result
        if step.kind == "energy condition":
            return self.condition_statement(step.component) + "."
        if step.kind == "matter" and isinstance(r, dict):
            if r.get("diagonal"):
                return (r"The stress-energy tensor is diagonal in the frame, so \(\rho\) and the \(p_{(k)}\) are the "
                        r"energy density and the principal pressures measured by the frame's observers.")
            return (r"The stress-energy tensor is not diagonal in the frame: its diagonal entries are listed, but they "
                    r"are not the principal pressures (stepper does not diagonalise \(T\)), and the energy conditions "
                    r"are not decided from them.")
        if step.kind == "frame" and isinstance(r, dict):
            time = self.sym(step.params.get("time", ""))
            diagonal = all(len(v) == 1 for v in r.get("vectors", {}).values())
            how = ("the metric is diagonal, so each frame vector is a coordinate direction divided by its length"
                   if diagonal else "Gram--Schmidt within the blocks of the metric")
            return (rf"Orthonormal frame of the observers at rest on the hypersurfaces \({time} = \text{{const}}\) "
                    rf"({how}). The frame vector \(e_{{(x)}}\) starts from the coordinate direction \(\partial_x\); "
                    r"\(N_{(x)}\) is the squared norm of the vector before it is normalised, and the frame exists "
                    r"where every \(N_{(x)} > 0\).")
        if fields(step) in ANNOTATIONS and not (fields(step) == ("summary", "stress_energy", "") and not isinstance(r, dict)):
            return ANNOTATIONS[fields(step)]
        if step.kind == "field equations" and isinstance(r, dict):
            return (r"Einstein's field equations with the cosmological constant "
                    rf"\(\Lambda = {self.writer.inline(r['cosmological_constant'])}\), solved for the stress-energy "
                    r"tensor \(T_{ij}\) that the metric requires.")
        if fields(step) == ("ansatz", "field_equation", "equations") and isinstance(r, dict):
            unknowns = ", ".join(rf"\({self.function_tex(f)}\)" for f in step.params.get("unknowns", []))
            return (rf"The field equations \(E_{{ij}} = G_{{ij}} + \Lambda g_{{ij}} = 0\) for the unknowns {unknowns}: "
                    r"each listed equation is a component's numerator with the factors that cannot vanish removed; "
                    r"duplicates (a multiple of another component by a factor free of the unknowns) and components "
                    r"that vanish identically are named below.")
        if fields(step) == ("ansatz", "field_equation", "dependence"):
            return ("Which equations follow from the others by the contracted Bianchi identity, which holds for "
                    "every metric and ties the components \\(E_{ij}\\) and their derivatives together.")
        if step.kind == "ode solution" and isinstance(r, dict):
            key = step.params.get("component", "")
            return (rf"Solve \({self.E(key)} = 0\) (with the earlier solutions put in) for "
                    rf"\({self.function_tex(r['unknown'])}\) with sympy's \texttt{{dsolve}}.")
        if fields(step) == ("ansatz", "ansatz_solution", "") and isinstance(r, dict):
            return "The metric with the solution put in."
        if self.is_moved(step):
            return self.moved_annotation(step)
        if step.kind == "raising" and step.quantity in QUANTITIES and fields(step) not in ANNOTATIONS:
            q = QUANTITIES[step.quantity]
            return rf"The {escape_text(q.words)}, \({q.formula}\) (components not listed vanish)."
        if step.kind == "geodesic":
            return (r"Geodesic equations as a first-order system in \(x^a\) and \(u^a = dx^a/d\tau\): the "
                    r"accelerations \(du^a/d\tau = -\Gamma^a_{bc}\,u^b u^c\), summed over all \(b\) and \(c\), so "
                    r"that each cross term \(b \ne c\) appears twice.")
        return escape_text(step.annotation)

    @staticmethod
    def is_moved(step: Step) -> bool:
        """A component the audit raised or lowered into the index position a claim names."""
        return (step.kind in ("raising", "lowering") and bool(step.component) and step.quantity in QUANTITIES
                and "positions" in step.params)

    def moved_annotation(self, step: Step) -> str:
        p = step.params
        names = step.component.split(",")
        symbol = component_symbol(step.quantity, names, self.writer, p["positions"])
        source = QUANTITIES[p["source"]]
        how = "raised with the inverse metric" if step.kind == "raising" else "lowered with the metric"
        return (rf"The {escape_text(QUANTITIES[step.quantity].words)} with {position_words(p['positions'])}, "
                rf"\({symbol}\), for the audit: {how} from the recorded {escape_text(source.words)} "
                rf"(components of the metric that vanish are left out of the sum).")

    def component_annotation(self, step: Step) -> str:
        quantity = step.quantity
        names = step.component.split(",")
        symbol = component_symbol(quantity, names, self.writer)
        title = {"christoffel": "Christoffel symbol", "riemann": "Riemann component",
                 "ricci": "Ricci component", "einstein": "Einstein component",
                 "stress_energy": "Stress-energy component"}.get(quantity, escape_text(quantity.replace("_", " ")))
        twin = None
        if quantity == "christoffel" and names[1] != names[2]:
            twin = component_symbol(quantity, [names[0], names[2], names[1]], self.writer)
        elif quantity == "riemann":
            twin = "-" + component_symbol(quantity, [names[0], names[1], names[3], names[2]], self.writer)
        elif quantity in ("ricci", "einstein", "stress_energy") and names[0] != names[1]:
            twin = component_symbol(quantity, [names[1], names[0]], self.writer)
        how = {"ricci": " by contracting the Riemann tensor",
               "stress_energy": " that the metric requires"}.get(quantity, "")
        return rf"{title} \({symbol}\){how}" + (rf" (\(= {twin}\))" if twin else "") + "."

    def condition_statement(self, key: str) -> str:
        """An energy condition in words and symbols."""
        n = self.d.metric.dimension
        strong_sum = r"\rho + \sum_k p_{(k)} \ge 0" if n == 4 else rf"({n} - 3)\rho + \sum_k p_{{(k)}} \ge 0"
        return {
            "null": r"\textbf{Null energy condition}: \(\rho + p_{(k)} \ge 0\) for every principal pressure \(p_{(k)}\)",
            "weak": r"\textbf{Weak energy condition}: \(\rho \ge 0\) and \(\rho + p_{(k)} \ge 0\) for every \(k\)",
            "strong": (r"\textbf{Strong energy condition}: \(\rho + p_{(k)} \ge 0\) for every \(k\) and "
                       rf"\({strong_sum}\)"),
            "dominant": r"\textbf{Dominant energy condition}: \(\rho \ge |p_{(k)}|\) for every \(k\)",
        }.get(key, escape_text(key))

    # energy conditions -----------------------------------------------------------
    def inequality_tex(self, label: str) -> str:
        """An inequality label of the trace ("rho + p_(r)", "2*rho + sum p") as LaTeX."""
        m = re.fullmatch(r"(?:(\d+)\*)?rho(?: ([+-]) (?:p_\((\w+)\)|(sum p)))?", label)
        if not m:
            return rf"\texttt{{{escape_text(label)}}} \ge 0"
        factor, sign, direction, total = m.groups()
        tex = (factor or "") + r"\rho"
        if direction:
            tex += f" {sign} p_{frame_index(direction, self.writer)}"
        elif total:
            tex += f" {sign} " + r"\sum_k p_{(k)}"
        return tex + r" \ge 0"

    def point_tex(self, point: dict) -> str:
        return ",\\ ".join(f"{self.sym(name)} = {self.writer.inline(value)}" for name, value in point.items())

    def outcome_parts(self, row: dict) -> tuple[str, str, str]:
        """The outcome of one inequality, from how it was decided: (word, what it says in the table,
        what follows the inequality in a sentence).  Proven; violated everywhere or at an exact point of the
        region; undecided, with why."""
        decision = Decision.from_data(row["decision"])
        method = decision.method
        functions = ", free functions and their derivatives taken as real" if decision.free_functions else ""
        if decision.function_signs:
            functions = ", with " + ", ".join(
                rf"\({self.function_sign_tex(s)}\)" for s in decision.function_signs) + " as declared"
        if method is Method.IDENTICALLY_ZERO:
            return "proven", "identically zero", "holds: it is identically zero"
        if method is Method.DECLARED_SIGNS and decision.holds:
            why = f"non-negative for every value the declared signs allow (sympy's assumptions{functions})"
            return "proven", why, "holds: it is " + why
        if method is Method.DECLARED_SIGNS:
            why = f"negative for every value the declared signs allow (sympy's assumptions{functions})"
            return "violated everywhere", why, "fails everywhere: it is " + why
        if method is Method.EXACT_POINT:
            where = rf"at the point \({self.point_tex(decision.point)}\) of the region"
            value_text = rf"\({self.number_tex(decision.value_there)} < 0\) (exact value)"
            return "violated", f"{where} it equals {value_text}", f"fails {where}, where it equals {value_text}"
        if method is Method.SAMPLED:
            why = (r"the declared signs do not settle its sign; it is \(\ge 0\) at all "
                   rf"{decision.points} exact points sampled from the region where the frame exists "
                   rf"(evaluated to {decision.digits} digits): evidence, not proof")
            return "undecided", why, "is undecided: " + why
        if method is Method.FREE_FUNCTIONS:
            why = "it depends on free functions, and the declared signs do not fix its sign"
            return "undecided", why, "is undecided: " + why
        why = breakable_text(decision.sentence(row["value"]))
        return "undecided", why, "is undecided: " + why

    def outcome_tex(self, row: dict) -> str:
        word, what, _ = self.outcome_parts(row)
        return rf"\textbf{{{word}}}: {what}"

    def region_tex(self, region: dict) -> str:
        return ", ".join(rf"\({self.sym(name)} \in [{self.writer.inline(lo)}, {self.writer.inline(hi)}]\)"
                         for name, (lo, hi) in region.items())

    def condition_table(self, step: Step) -> dict | None:
        rows = step.params.get("inequalities", {})
        if not rows:
            return None
        out = []
        for label, row in rows.items():
            out.append({"inequality": self.inequality_tex(label),
                        "value": self.value_tex(row["value"], CELL_WIDTH),
                        "outcome": self.outcome_tex(row)})
        return {"rows": out}

    def condition_summary(self, step: Step) -> str:
        """Why an energy condition holds, fails or is undecided, in words, from its rows (no final period)."""
        result = step.result
        rows = step.params.get("inequalities", {})
        if not rows:
            return self.evidence_tex(step)
        if result.holds is True:
            return "every inequality is proven"
        wanted = False if result.holds is False else None
        for label, row in rows.items():
            if row["holds"] is wanted:
                return rf"\({self.inequality_tex(label)}\) " + self.outcome_parts(row)[2]
        return breakable_text(result.evidence)

    # steps ---------------------------------------------------------------------
    def simplifications_for(self, step: Step) -> list[dict]:
        out = []
        for s in step.simplifications:
            before = None
            if s.before is not None:
                text = self.writer.inline(s.before)
                before = {"tex": self.writer.breakable(s.before) if len(text) > 90 else text, "long": len(text) > 90}
            out.append({"rewrite": escape_text(s.rewrite), "before": before, "before_terms": s.before_size})
        return out

    def verdict_statement(self, step: Step) -> str:
        if step.kind == "energy condition":
            return self.condition_statement(step.component)
        return STATEMENTS.get(fields(step)) or escape_text(step.result.statement)

    def verdict_evidence(self, step: Step) -> str:
        """A verdict's evidence as LaTeX text."""
        if step.kind == "energy condition":
            return self.condition_summary(step)
        return self.evidence_tex(step)

    def residue_tex(self, residue: dict) -> str:
        """A perfect-fluid residue: T_(a)(b) off the diagonal, or p_(a) - p_(b)."""
        a, b = residue["frame_indices"]
        if residue["kind"] == "off-diagonal":
            return rf"\(T_{{{frame_index(a, self.writer)}{frame_index(b, self.writer)}}}\)"
        return (rf"\({component_symbol('pressure', [a], self.writer)} - "
                rf"{component_symbol('pressure', [b], self.writer)}\)")

    def evidence_tex(self, step: Step) -> str:
        """A verdict's evidence as LaTeX text, typeset from the step's fields where it has them."""
        verdict, p = step.result, step.params
        if fields(step) == ("verdict", "perfect_fluid", "") and "residue" in p:
            residue = self.residue_tex(p["residue"])
            if verdict.holds is False:
                return residue + " is not zero; a fluid moving relative to these observers is not tested"
            return residue + ": " + breakable_text(p.get("zero_test", ""))
        if fields(step) == ("verdict", "perfect_fluid", "") and verdict.holds and not p.get("vacuum"):
            return f"each of the {p['checked']} conditions checked vanishes exactly"
        if fields(step) == ("verdict", "trace_free", "") and "trace" in p:
            if verdict.holds is False:
                return rf"the trace \(T^i{{}}_i = {self.value_tex(p['trace'])}\) is not zero"
            if verdict.holds:
                return rf"the trace \(T^i{{}}_i\) vanishes ({breakable_text(p.get('zero_test', ''))})"
            return (rf"the trace \(T^i{{}}_i = {self.value_tex(p['trace'])}\) is not proven zero: "
                    + breakable_text(p.get("zero_test", "")))
        if fields(step) == ("check", "", "frame") and p.get("residues") == "unnormalised frame":
            return (r"\(g(w_{(a)}, w_{(b)}) - \eta_{(a)(b)} N_{(a)}\) for the unnormalised vectors: "
                    + self.check_outcome_tex(verdict.holds, p["count"]))
        return breakable_text(verdict.evidence)

    def check_outcome_tex(self, holds: bool | None, count: int) -> str:
        how = "have canonical rational form 0" if self.d.arithmetic == "field" else "reduce to 0 with sympy"
        return {True: f"all {count} {how}", False: "one is not zero",
                None: "not all proven symbolically"}[holds]

    def step_entry(self, step: Step) -> dict:
        shown_before = self.formula_first_shown.get(step.formula)
        if shown_before is None:
            self.formula_first_shown[step.formula] = self.number[step.id]
        verdict = None
        if isinstance(step.result, Verdict):
            word = _condition_word if step.kind == "energy condition" else _verdict_word
            verdict = {"statement": self.verdict_statement(step), "word": word(step.result.holds),
                       "holds": step.result.holds, "evidence": self.verdict_evidence(step),
                       "condition": step.kind == "energy condition"}
        table = self.condition_table(step) if step.kind == "energy condition" else None
        region = step.params.get("region") if step.kind == "energy condition" else None
        return {
            "number": self.number[step.id],
            "anchor": self.anchor(step.id),
            "id": _id_text(step.id),
            "kind": "frame missing" if step.kind == "frame" and isinstance(step.result, Verdict) else step.kind,
            "annotation": self.annotation(step),
            "formula": step.formula,
            "formula_seen_at": None if shown_before is None else {"anchor": f"step{shown_before}", "number": shown_before},
            "substituted": step.substituted,
            "equations": [] if step.kind == "summary" else self.equations_for(step),
            "notes": self.notes_for(step),
            "table": table,
            "region": self.region_tex(region) if region and table else "",
            "simplifications": self.simplifications_for(step) if step.kind != "summary" else [],
            "uses": [self.link(u) for u in step.uses],
            "verdict": verdict,
            "params": {k: escape_text(str(v)) for k, v in step.params.items()
                       if k in ("method", "convention") and isinstance(v, str)},
        }

    def sections(self, entries: list[dict], steps: list[Step]) -> list[dict]:
        grouped: dict[str, list[dict]] = {key: [] for key in SECTION_TITLES}
        for step, entry in zip(steps, entries):
            grouped[section_of(step)].append(entry)
        out = []
        for key, title in SECTION_TITLES.items():
            if grouped[key]:
                out.append({"key": key, "title": title, "intro": self.section_intro(key), "steps": grouped[key]})
        return out

    def section_intro(self, key: str) -> list[str]:
        r = self.d.results
        if key == "matter":
            fe = r.get("field_equations", {})
            lam = fe.get("cosmological_constant", sympy.Integer(0))
            kappa = fe.get("kappa", 8 * sympy.pi)
            units = (r"in geometric units \(G = c = 1\)" if fe.get("units") == "geometric"
                     else r"with \(G\) and \(c\) kept as symbols")
            text = [(r"The field equations \(G_{ij} + \Lambda g_{ij} = \kappa T_{ij}\) are read from left to right: the "
                     r"metric fixes the curvature, and the curvature fixes the stress-energy tensor \(T_{ij}\) that its "
                     rf"matter must supply. Here \(\kappa = {self.writer.inline(kappa)}\) ({units}) and "
                     rf"\(\Lambda = {self.writer.inline(lam)}\).")]
            frame = r.get("frame", {})
            if frame.get("built"):
                text.append(r"The energy density \(\rho\) and the pressures \(p_{(k)}\) are what observers at rest on "
                            rf"\({self.sym(frame.get('time', ''))} = \text{{const}}\) measure, in their orthonormal "
                            r"frame.")
            elif frame:
                reason = frame.get("reason", "no orthonormal frame is built")
                text.append(breakable_text(reason[:1].upper() + reason[1:]) + ".")
            return text
        if key == "energy":
            text = [(r"Each condition is a set of inequalities in \(\rho\) and the \(p_{(k)}\), multiplied by "
                     r"\(\kappa > 0\), which changes no sign. Each is \textbf{proven} from the declared signs of the "
                     r"symbols and free functions (or because it vanishes identically), \textbf{violated} (everywhere, or at an exact point "
                     r"of the sampling region, which is a counterexample), or \textbf{undecided}, with the reason; "
                     r"non-negative values at every sampled point are evidence, not proof.")]
            region = next((s.params.get("region") for s in self.d.steps
                           if s.kind == "energy condition" and s.params.get("region")), None)
            if region:
                text.append("Sampling region: " + self.region_tex(region) + ", where every squared norm "
                            r"\(N_{(x)}\) of the frame is positive.")
            return text
        if key == "ansatz":
            eq = self.d.step("ansatz/equations") if self.has("ansatz/equations") else None
            if eq is None:
                return []
            unknowns = ", ".join(rf"\({self.function_tex(f)}\)" for f in eq.params.get("unknowns", []))
            lam = eq.params.get("cosmological_constant", sympy.Integer(0))
            return [(rf"The metric contains the unknown functions {unknowns}. The field equations "
                     rf"\(E_{{ij}} \equiv G_{{ij}} + \Lambda g_{{ij}} = 0\) with \(\Lambda = {self.writer.inline(lam)}\) "
                     r"decide them: first the equations are reduced and the independent ones found, then they are "
                     r"solved one unknown at a time, and the solution is put back into every component.")]
        if key == "geodesics":
            example = self.d.metric.names[min(1, len(self.d.metric.names) - 1)]
            return [(rf"The velocity components are written \({self.velocity_tex(example)}\) "
                     rf"for \(d{self.sym(example)}/d\tau\) and so on (the subscript names the coordinate; these are "
                     r"the contravariant components \(u^a\)), the names a claims file uses for them. \(\tau\) is the "
                     r"proper time along a timelike geodesic, an affine parameter along a null one.")]
        return []

    # the whole report ---------------------------------------------------------------
    def metric_section(self) -> dict:
        m = self.d.metric
        w = self.writer
        assumptions = dict(m.assumptions)
        return {
            "title": escape_text(m.title),
            "pdf_title": pdf_string(m.title),
            "notes": escape_text(m.notes) if m.notes else "",
            "dimension": m.dimension,
            "coordinates": [w.symbol(n) for n in m.names],
            "coordinate_names": [escape_text(n) for n in m.names],
            "symbols": [{"tex": w.symbol(name), "name": escape_text(name), "assumption": escape_text(word)}
                        for name, word in assumptions.items()],
            "functions": [{"tex": w.symbol(f.func.__name__),
                           "arguments": ", ".join(w.symbol(a.name) for a in f.args)} for f in m.functions],
            "function_signs": [self.function_sign_tex(sign) for sign in m.function_signs],
            "abbreviations": [{"tex": w.definition(name, value)} for name, value in m.abbreviations],
            "line_element": breakable_text(m.line_element) if m.line_element else "",
            "components": [{"tex": tex, "long": long}
                           for tex, long in mapping_lines(self.d.results["metric"], "metric", w)],
            "arithmetic": escape_text(self.d.arithmetic_description),
            "signature": self.signature_text(),
        }

    def signature_text(self) -> str:
        """The signature in words and signs, "Lorentzian, signature (-,+,+,+)", from the record's convention data;
        a sentence saying it is not fixed when the declared signs do not fix it."""
        signs = (self.d.convention_data or {}).get("signature")
        if not signs:
            return "Signature: not fixed by the declared signs of the symbols (sympy's assumptions)."
        negative = signs.count("-")
        kind = ("Riemannian" if negative in (0, len(signs)) else
                "Lorentzian" if 1 in (negative, len(signs) - negative) else "of indefinite signature")
        return f"Signature: \\(({','.join(signs)})\\), {kind}, as fixed by the declared signs."

    def summary(self) -> dict:
        r = self.d.results
        w = self.writer
        rows = []
        for lhs, key in (("R", "scalar"), ("K", "kretschmann")):
            if key in r:
                rows.append(self.eq(lhs, r[key]))
        matter = []
        fluid = r.get("perfect_fluid")
        if fluid:
            matter = [self.eq(r"\rho", fluid["density"]), self.eq("p", fluid["pressure"])]
        elif "energy_density" in r:
            matter = [self.eq(r"\rho", r["energy_density"])]
            matter += self.pack([self.eq(component_symbol("pressure", [k], w), v)
                                 for k, v in r.get("pressures", {}).items()])
        solution = []
        ansatz = r.get("ansatz", {})
        functions = {str(f): f for f in self.d.metric.functions}
        for name, value in ansatz.get("solution", {}).items():
            f = functions.get(name)
            solution.append(self.eq(w.inline(f) if f is not None else escape_text(name), value))
        verdicts = []
        for k, v in r.get("verdicts", {}).items():
            verdicts.append({"label": VERDICTS[k].label, "word": _verdict_word(v["holds"]),
                             "holds": v["holds"], "evidence": self.evidence_tex(self.d.step(f"verdict/{k}")),
                             "link": self.link(f"verdict/{k}")})
        for key in ENERGY_CONDITIONS:
            step_id = f"energy_conditions/{key}"
            if self.has(step_id):
                step = self.d.step(step_id)
                verdicts.append({"label": f"{key.capitalize()} energy condition",
                                 "word": _condition_word(step.result.holds), "holds": step.result.holds,
                                 "evidence": self.condition_summary(step), "link": self.link(step_id)})
        if self.has("ansatz/check") and isinstance(self.d.step("ansatz/check").result, Verdict):
            check = self.d.step("ansatz/check").result
            verdicts.append({"label": "The ansatz solution satisfies every field equation",
                             "word": _verdict_word(check.holds), "holds": check.holds,
                             "evidence": breakable_text(check.evidence), "link": self.link("ansatz/check")})
        elif self.has("ansatz/solution") and isinstance(self.d.step("ansatz/solution").result, Verdict):
            unsolved = self.d.step("ansatz/solution").result
            verdicts.append({"label": "The ansatz equations are solved", "word": _verdict_word(unsolved.holds),
                             "holds": unsolved.holds, "evidence": breakable_text(unsolved.evidence),
                             "link": self.link("ansatz/solution")})
        counts = []
        for quantity, label in (("christoffel", r"Christoffel symbols \(\Gamma^a_{bc}\)"),
                                ("riemann", r"Riemann components \(R^a{}_{bcd}\)"),
                                ("ricci", r"Ricci components \(R_{ij}\)"), ("einstein", r"Einstein components \(G_{ij}\)"),
                                ("weyl", r"independent Weyl components \(C_{abcd}\)"),
                                ("stress_energy", r"stress-energy components \(T_{ij}\)")):
            if quantity in r:
                counts.append({"label": label, "count": len(r[quantity])})
        numeric = r.get("numeric_verification")
        numeric_line = None
        if numeric:
            numeric_line = {
                "word": {True: "passed", False: "FAILED", None: "not done"}[numeric["passed"]],
                "deviations": ", ".join(f"{escape_text(q)} {escape_text(f'{v:.3g}')}" for q, v in numeric["deviations"].items()),
                "points": len(numeric["points"]), "digits": numeric["digits"],
                "tolerance": escape_text(f"{numeric['tolerance']:.3g}"), "link": self.link("numeric_verification")}
        matter_intro = ("The matter the metric requires, a perfect fluid at rest in the frame:" if fluid else
                        "The matter the metric requires, as measured in the orthonormal frame:")
        if not fluid and not r.get("frame_diagonal", True):
            matter_intro = ("The stress-energy tensor is not diagonal in the orthonormal frame, so its diagonal "
                            "entries below are not the energy density and principal pressures:")
        if "stress_energy" in r and not r["stress_energy"]:
            matter = [self.line("T_{ij} = 0")]
            matter_intro = "The metric requires no matter: every component of the stress-energy tensor vanishes (vacuum)."
        return {"equations": rows, "matter": matter if fluid is None else self.pack(matter),
                "matter_intro": matter_intro,
                "solution": self.pack(solution), "verdicts": verdicts, "counts": counts,
                "numeric": numeric_line}

    def claim_symbol(self, quantity: str, component: str, positions: str = "") -> str:
        """The typeset symbol a claim is about, or '' when there is none; ``positions`` are the claim's
        ``indices`` when it gave them."""
        w = self.writer
        if quantity == "ansatz_solution":
            return w.symbol(component) if component else ""
        scalars = {"determinant": "g", "scalar": "R", "kretschmann": "K", "energy_density": r"\rho"}
        if quantity in scalars:
            return scalars[quantity]
        if not component or not has_component_symbol(quantity):
            return ""
        names = component.split(",")
        if not all(n in self.d.metric.names for n in names):
            return ""
        return component_symbol(quantity, names, w, positions)

    def slip_tex(self, slip: dict) -> str:
        """The diagnosis typeset from the slip's data (the audit's words are the plain-text version)."""
        w = self.writer
        if slip.get("kind") == "metric_factor":
            table, key = slip["factor"]
            g = component_symbol(table, key.split(","), w)
            words = "inverse-metric" if table == "inverse_metric" else "metric"
            return rf"off by a factor of the {words} component \({g}\): the claim is \({g}\) times the correct value"
        tensor, component = slip["tensor"], slip["component"]
        names = component.split(",")
        other = component_symbol(tensor, names, w, slip["positions"])
        text = (rf"an index raised or lowered: the claim is \({other}\), the component with "
                rf"{position_words(slip['positions'])}")
        terms = slip.get("terms", [])
        if len(terms) > 4:
            return text
        shown = [r"\,".join([component_symbol(table, key.split(","), w) for table, key in t["factors"]]
                            + [component_symbol(tensor, t["component"].split(","), w, slip["positions"])])
                 for t in terms]
        lhs = component_symbol(tensor, names, w, slip["claimed"])
        return text + rf"; \({lhs} = {' + '.join(shown) or '0'}\)"

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
            indices = p.get("indices", "")
            rows.append({
                "anchor": self.anchor(step.id), "number": p["number"], "label": escape_text(p["label"]),
                "what": escape_text(p["quantity"].replace("_", " ") + (f" {p['component']}" if p["component"] else "")
                                    + (f", indices {indices}" if indices else "")),
                "symbol": self.claim_symbol(p["quantity"], p["component"], indices),
                "syntax": escape_text(p["syntax"]), "text": breakable_text(p["text"]),
                "outcome": escape_text(p["outcome"]), "agrees": p["outcome"] == "agrees",
                "diagnosis": self.slip_tex(p["slip"]) if p.get("slip") else escape_text(p["diagnosis"]),
                "evidence": breakable_text(plain_evidence[p["number"]]),
                "claimed": tex("claimed"), "correct": tex("correct"), "difference": tex("difference"),
                "checked": self.link(step.uses[0]), "earliest": p["earliest_wrong"]})
        moved = [self.step_entry(s) for s in self.d.steps if s.stage == "audit" and s.kind != "claim"]
        return {"title": escape_text(report["title"]), "claims": rows, "steps": moved,
                "all_agree": report["all_agree"], "earliest": report["earliest_wrong"],
                "agreed": sum(1 for r in rows if r["agrees"])}

    def checks(self) -> list[dict]:
        out = []
        for step in self.d.steps:
            if isinstance(step.result, Verdict):
                word = _condition_word if step.kind == "energy condition" else _verdict_word
                out.append({"link": self.link(step.id), "statement": self.verdict_statement(step),
                            "word": word(step.result.holds), "holds": step.result.holds,
                            "evidence": self.verdict_evidence(step)})
        return out


def report_model(derivation: Derivation) -> dict[str, Any]:
    """Plain data for the report templates."""
    model = _Model(derivation)
    steps = [s for s in derivation.steps if s.stage != "audit"]  # the audit's own steps go into its section
    entries = [model.step_entry(s) for s in steps]
    return {
        "metric": model.metric_section(),
        "conventions": [{"name": k, "text": v} for k, v in derivation.conventions_latex.items()],
        "steps": entries,
        "sections": model.sections(entries, steps),
        "audit": model.audit(),
        "summary": model.summary(),
        "checks": model.checks(),
    }
