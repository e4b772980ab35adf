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
import weakref
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
    "model": "The declared matter: field equations and conservation",
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
    ("check", "null_tetrad", "normalisation"): (r"The tetrad is null and normalised: the unnormalised vectors are "
                                               r"orthogonal, \(g(w_a, w_b) = \delta_{ab} N_a\), so \(l \cdot n = -1\), "
                                               r"\(m \cdot \bar m = 1\) and every other product vanishes."),
    ("frame components", "weyl_scalars", ""): (r"The Weyl scalars: the Weyl tensor in the null tetrad, "
                                              r"\(\Psi_0 = C(l,m,l,m)\), \(\Psi_1 = C(l,n,l,m)\), "
                                              r"\(\Psi_2 = C(l,m,\bar m,n)\), \(\Psi_3 = C(l,n,\bar m,n)\), "
                                              r"\(\Psi_4 = C(n,\bar m,n,\bar m)\) with "
                                              r"\(C(u,v,w,x) = C_{abcd} u^a v^b w^c x^d\)."),
    ("check", "ansatz_solution", ""): (r"Put the solution into every component \(E_{ij} = G_{ij} + \Lambda g_{ij}\), including the "
                     r"duplicates and those that follow by the Bianchi identity."),
}

#: Typeset statements of the new verdicts, keyed like ANNOTATIONS.
STATEMENTS = {
    ("verdict", "trace_free", ""): r"Trace-free stress-energy, \(T^i{}_i = 0\)",
    ("verdict", "perfect_fluid", ""): r"Perfect fluid at rest in the frame",
    ("check", "", "frame"): r"\(g(e_{(a)}, e_{(b)}) = \eta_{(a)(b)}\)",
    ("check", "ansatz_solution", ""): r"The solution satisfies every field equation \(E_{ij} = 0\)",
    ("check", "", "given frame"): "The vectors of the metric file are what they are said to be",
    ("check", "null_tetrad", "normalisation"): r"\(l \cdot n = -1\), \(m \cdot \bar m = 1\), all other products 0",
    ("check", "", "null directions"): "The coordinate directions listed are null",
    ("check", "", "null dust"): r"Null dust: \(T_{ab} = f\, k_a k_b\) with \(k\) null",
}

#: Typeset annotations of the curvature chain's steps whose words do not depend on the metric, keyed like
#: ANNOTATIONS (the trace keeps the engine's plain-text sentences).
CHAIN_ANNOTATIONS = {
    ("input", "metric", ""): r"The metric components \(g_{ij}\) read from the input.",
    ("derivative", "metric_derivatives", ""): (r"First partial derivatives \(\partial_k g_{ij}\) of the metric for "
                                               r"\(i \le j\) (\(\partial_k g_{ji} = \partial_k g_{ij}\)); those not "
                                               r"listed vanish."),
    ("determinant", "determinant", ""): r"Determinant of the metric, \(g = \det(g_{ij})\).",
    ("inverse", "inverse_metric", ""): r"Inverse metric \(g^{ij}\).",
    ("check", "inverse_metric", "identity"): (r"The product of the inverse and the metric is the identity, "
                                              r"\(g^{ik} g_{kj} = \delta^i{}_j\)."),
    ("check", "contracted_christoffel", ""): (r"The contracted Christoffel symbols equal the derivative of "
                                              r"\(\ln\sqrt{|g|}\) in every direction."),
    ("summary", "ricci", ""): (r"Ricci tensor \(R_{bd} = R^a{}_{bad}\) from the contraction of the Riemann tensor "
                               r"(components not listed vanish)."),
    ("check", "ricci", "symmetry"): r"The Ricci tensor is symmetric, \(R_{ij} = R_{ji}\).",
    ("route", "ricci_by_trace_identity", ""): (r"Ricci tensor by the second route, from the Christoffel symbols and "
                                               r"\(\ln\sqrt{|g|}\) (independent components \(i \le j\); those not "
                                               r"listed vanish)."),
    ("check", "ricci", "agreement"): r"The two routes to the Ricci tensor agree component by component.",
    ("contraction", "scalar", ""): r"Scalar curvature \(R = g^{ij} R_{ij}\).",
    ("summary", "einstein", ""): (r"Einstein tensor \(G_{ij} = R_{ij} - \tfrac12 R\,g_{ij}\) (components not "
                                  r"listed vanish)."),
    ("lowering", "riemann_lowered", ""): (r"Riemann tensor with all indices down, \(R_{abcd} = g_{ae} R^e{}_{bcd}\), "
                                          r"for \(a < b\), \(c < d\) and \((a, b) \le (c, d)\); the others follow "
                                          r"from \(R_{abcd} = -R_{bacd} = -R_{abdc} = R_{cdab}\)."),
    ("check", "riemann_lowered", "pair_symmetry"): (r"Pair exchange symmetry \(R_{abcd} = R_{cdab}\) of the lowered "
                                                    r"components."),
    ("check", "riemann_lowered", "first_bianchi"): (r"First Bianchi identity: the cyclic sum "
                                                    r"\(R_{abcd} + R_{acdb} + R_{adbc}\) vanishes."),
    ("invariant", "kretschmann", ""): (r"Kretschmann scalar \(K = R_{abcd} R^{abcd}\), the full contraction of the "
                                       r"Riemann tensor with itself, summed as 4 times the sum over \(a < b\) and "
                                       r"\(c < d\)."),
    ("tensor", "weyl", ""): (r"Weyl tensor with all indices down, for \(a < b\), \(c < d\) and "
                             r"\((a, b) \le (c, d)\); components not listed vanish."),
    ("tensor", "cotton", ""): (r"Cotton tensor with all indices down (three dimensions), built from the Schouten "
                               r"tensor \(P_{ab} = R_{ab} - \tfrac14 R\,g_{ab}\), for \(b < c\); the others "
                               r"follow from \(\mathcal{C}_{acb} = -\mathcal{C}_{abc}\), and components not listed "
                               r"vanish."),
    ("verdict", "ricci_flat", ""): r"Ricci-flat: every component of the Ricci tensor vanishes, \(R_{ij} = 0\).",
    ("verdict", "constant_curvature", ""): (r"Constant curvature: \(R_{abcd} = k\,(g_{ac} g_{bd} - g_{ad} g_{bc})\) "
                                            r"with constant \(k = R/(n(n-1))\)."),
    ("verdict", "conformally_flat", ""): r"Conformally flat: the Weyl tensor vanishes, \(C_{abcd} = 0\).",
    ("verdict", "bianchi", ""): (r"Contracted Bianchi identity: the Einstein tensor is divergence-free, "
                                 r"\(\nabla^a G_{ab} = 0\)."),
}

#: Typeset statements of the curvature chain's checks and verdicts, keyed like ANNOTATIONS.
CHAIN_STATEMENTS = {
    ("check", "inverse_metric", "identity"): r"\(g^{ik} g_{kj} = \delta^i{}_j\)",
    ("check", "contracted_christoffel", ""): r"\(\Gamma^l{}_{li} = \partial_i \ln\sqrt{|g|}\) for every \(i\)",
    ("check", "ricci", "symmetry"): r"\(R_{ij} = R_{ji}\)",
    ("check", "ricci", "agreement"): r"The two routes to the Ricci tensor agree",
    ("check", "riemann_lowered", "pair_symmetry"): r"\(R_{abcd} = R_{cdab}\)",
    ("check", "riemann_lowered", "first_bianchi"): r"\(R_{a[bcd]} = 0\)",
    ("verdict", "ricci_flat", ""): r"Ricci-flat: \(R_{ij} = 0\)",
    ("verdict", "constant_curvature", ""): (r"Constant curvature: \(R_{abcd} = k\,(g_{ac} g_{bd} - g_{ad} g_{bc})\) "
                                            r"with constant \(k = R/(n(n-1))\)"),
    ("verdict", "conformally_flat", ""): r"Conformally flat: \(C_{abcd} = 0\)",
    ("verdict", "bianchi", ""): r"Contracted Bianchi identity: \(\nabla^a G_{ab} = 0\)",
    ("numeric check", "", ""): (r"The symbolic Christoffel symbols, Riemann and Ricci tensors and scalar curvature "
                                r"agree with an independent numeric computation"),
}

#: What the residues of each check are, typeset, keyed like ANNOTATIONS.
CHECK_RESIDUES = {
    ("check", "inverse_metric", "identity"): r"the entries of \(g^{ik} g_{kj} - \delta^i{}_j\)",
    ("check", "contracted_christoffel", ""): "the differences of the two routes",
    ("check", "ricci", "symmetry"): r"the differences \(R_{ij} - R_{ji}\)",
    ("check", "ricci", "agreement"): "the component-wise differences",
    ("check", "riemann_lowered", "pair_symmetry"): r"\(R_{abcd} - R_{cdab}\) on the independent components",
    ("check", "riemann_lowered", "first_bianchi"): r"the cyclic sums with \(b < c < d\)",
    ("check", "", "frame"): r"\(g(w_{(a)}, w_{(b)}) - \eta_{(a)(b)} N_{(a)}\) for the unnormalised vectors",
    ("check", "ansatz_solution", ""): r"the components \(E_{ij}\) with the solution put in",
    ("check", "", "given frame"): "the products of the vectors minus their required values",
    ("check", "", "null directions"): r"the diagonal entries \(g_{vv}\) and \(g^{uu}\) listed",
    ("check", "", "null dust"): r"the components of \(T_{ab} - f\, k_a k_b\)",
}

#: The quantities the numeric cross-check compares, in words.
NUMERIC_NAMES = {"christoffel": "Christoffel symbols", "riemann": "Riemann tensor", "ricci": "Ricci tensor",
                 "scalar": "scalar curvature"}

#: Width (in characters of LaTeX) of an expression shown in a table cell before it is broken.
CELL_WIDTH = 48

#: A declared sign of a free function as a relation, in LaTeX.
_SIGN_TEX = {"positive": "> 0", "nonnegative": r"\ge 0", "negative": "< 0", "nonpositive": r"\le 0",
             "nonzero": r"\ne 0"}

_LONG_WORD = re.compile(r"\S{25,}")

#: Symbols the report uses for quantities of its own, what each stands for, and the symbol it takes instead
#: when a name of the metric prints the same (a function Lambda(r), a coordinate tau, a parameter rho).
OWN_SYMBOLS = (
    (r"\Lambda", "the cosmological constant", r"\Lambda_{\mathrm{c}}"),
    (r"\kappa", "the coupling constant of the field equations", r"\kappa_{\mathrm{E}}"),
    (r"\rho", "the energy density", r"\rho_{\mathrm{E}}"),
    (r"\tau", "the proper time or affine parameter along a geodesic", r"\tau_{\mathrm{g}}"),
)


def _own_use(tex: str) -> re.Pattern:
    """The report's own uses of a symbol: the command not in braces (the metric's names print braced, {\\Lambda},
    and so does \\ensuremath{\\Lambda} in escaped text) and not followed by more letters."""
    return re.compile(r"(?<!\{)" + re.escape(tex) + r"(?![A-Za-z])")


def _renamed(value: Any, renames: dict[str, str]) -> Any:
    """Every string in nested lists and dicts with the report's own uses of the symbols renamed."""
    if isinstance(value, str):
        for tex, new in renames.items():
            value = _own_use(tex).sub(lambda _: new, value)
        return value
    if isinstance(value, dict):
        return {k: _renamed(v, renames) for k, v in value.items()}
    if isinstance(value, list):
        return [_renamed(v, renames) for v in value]
    return value


def _strings(value: Any):
    if isinstance(value, str):
        yield value
    elif isinstance(value, dict):
        for v in value.values():
            yield from _strings(v)
    elif isinstance(value, list):
        for v in value:
            yield from _strings(v)


def breakable_text(text: str) -> str:
    """Escaped text in which long unbroken runs (printed expressions) may break."""
    escaped = escape_text(text)

    def soften(match: re.Match) -> str:
        return re.sub(r"([*+,(=/])", r"\1\\allowbreak{}", match.group())
    return _LONG_WORD.sub(soften, escaped)


def fields(step: Step) -> tuple[str, str, str]:
    """What a step is: its (kind, quantity, component)."""
    return step.kind.value, step.quantity, step.component


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
        self.by_id = {s.id: s for s in derivation.steps}
        self.writer = ExpressionWriter(m.abbreviations, m.coordinates)  # velocity_tex needs it for coordinates
        self.clashes = self.symbol_clashes()
        self.writer = ExpressionWriter(m.abbreviations, m.coordinates, braced=self.clashes)
        velocities = {x: (sympy.Symbol(self.velocity_name(x), real=True), self.velocity_tex(x)) for x in m.names}
        self.writer = ExpressionWriter(m.abbreviations, m.coordinates, velocities, time=self.time_coordinate(),
                                       braced=self.clashes)
        self.formula_first_shown: dict[str, int] = {}

    # small pieces ---------------------------------------------------------
    def anchor(self, step_id: str) -> str:
        return f"step{self.number[step_id]}"

    def link(self, step_id: str) -> dict:
        return {"anchor": self.anchor(step_id), "number": self.number[step_id],
                "name": self.step_name(self.by_id[step_id])}

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
            if fields(step) == ("check", "", "null directions"):
                return self.null_direction_lines(step.params.get("directions", {}))
            if fields(step) == ("check", "", "null dust") and "density" in step.params:
                return [self.eq("f", step.params["density"])]
            if fields(step) == ("verdict", "algebraic_type", "") and step.params.get("invariants"):
                return self.petrov_invariant_lines(step)
            if fields(step) == ("check", "", "given frame"):
                return self.pack([self.line(self.product_tex(p)) for p in step.params.get("products", [])])
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
            ("frame", "", "given"): self.given_frame_lines,
            ("frame", "null_tetrad", ""): lambda _: self.null_tetrad_lines(step),
            ("frame components", "weyl_scalars", ""): self.weyl_scalar_lines,
            ("matter", "", ""): self.density_lines,
            ("ansatz", "field_equation", "equations"): self.ansatz_equation_lines,
            ("ansatz", "ansatz_solution", ""): self.ansatz_solution_lines,
            ("ansatz", "ansatz_solution", "properties"): self.solved_metric_lines,
            ("geodesic", "", ""): self.geodesic_lines,
            ("model", "model_equation", "equations"): self.model_equation_lines,
            ("model", "model_conservation", ""): self.model_conservation_lines,
        }
        if step.kind.value == "model" and step.quantity == "model_solution":
            return self.model_solution_lines(step)
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

    def solved_metric_lines(self, result: dict) -> list[dict]:
        """The solved metric's R_ij = lambda g_ij, scalar curvature and Kretschmann scalar."""
        lines = []
        if "einstein_constant" in result:
            constant = result["einstein_constant"]
            lines.append(self.line(r"R_{ij} = 0" if constant == 0 else
                                   rf"R_{{ij}} = {self.writer.inline(constant)}\, g_{{ij}}"))
        for lhs, key in (("R", "scalar"), ("K", "kretschmann")):
            if key in result:
                lines.append(self.eq(lhs, result[key]))
        return lines

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

    # the null tetrad, the Weyl scalars and the algebraic type (stepper.petrov) ---------------------
    TETRAD_SYMBOLS = {"l": "l", "n": "n", "m": "m", "mbar": r"\bar m"}

    def null_tetrad_lines(self, step: Step) -> list[dict]:
        """w_k and N_k of the built tetrad, then l, n, m, mbar."""
        p, lines = step.params, []
        for label in p.get("order", []):
            w = rf"w_{frame_index(label, self.writer)} = {self.vector_tex(p['vectors_unnormalised'][label])}"
            n = rf"N_{frame_index(label, self.writer)} = {self.value_tex(p['squared_norms'][label])}"
            lines.append(self.line(w + r",\qquad " + n) if len(w) + len(n) + 8 <= SHORT_LATEX
                         else self.line(w))
            if len(w) + len(n) + 8 > SHORT_LATEX:
                lines.append(self.line(n))
        for name, components in step.result.items():
            lines.append(self.line(f"{self.TETRAD_SYMBOLS.get(name, 'v')} = {self.vector_tex(components)}"))
        return self.flush_together(lines)

    def weyl_scalar_lines(self, result: dict) -> list[dict]:
        return [self.eq(rf"\Psi_{k}", result[f"Psi{k}"]) for k in range(5) if f"Psi{k}" in result]

    def petrov_invariant_lines(self, step: Step) -> list[dict]:
        invariants = step.params["invariants"]
        return [self.eq("I", invariants["I"]), self.eq("J", invariants["J"])]

    PETROV_QUESTIONS = {
        "weyl_scalars_vanish": r"every \(\Psi_k\) vanishes (type O)",
        "hessian_vanishes": r"the Hessian \(H\) of the quartic vanishes (type N)",
        "hessian_proportional": r"\(H\) is a multiple of the quartic \(f\), \(h_i f_j = h_j f_i\) (type D)",
        "invariants_vanish": r"\(I = J = 0\) (type III)",
        "special": r"\(I^3 = 27 J^2\) (type II; type I otherwise)",
    }

    def petrov_element_tex(self, name: str) -> str:
        """Psi2, h3, "h0 f2 - h2 f0", I, J or "I^3 - 27 J^2" typeset."""
        if name.startswith("Psi"):
            return rf"\(\Psi_{name[3:]}\)"
        if name in ("I", "J"):
            return rf"\({name}\)"
        if name == "I^3 - 27 J^2":
            return r"\(I^3 - 27 J^2\)"
        if name.startswith("h") and len(name) == 2:
            return rf"\(h_{name[1]}\)"
        i, j = name[1], name[4]  # "hi fj - hj fi"
        return rf"\(h_{i} f_{j} - h_{j} f_{i}\)"

    def petrov_evidence_tex(self, step: Step) -> str:
        """The decisions the type rests on, in order, each with how it was made."""
        p = step.params
        parts = []
        for d in p.get("decisions", []):
            question = self.PETROV_QUESTIONS.get(d["question"], escape_text(d["question"]))
            if d["vanishes"] is True:
                parts.append(f"{question}: yes, all {d.get('count', len(d.get('elements', [])))} vanish "
                             f"({self.zero_test_tex(d['test'])})")
            elif d["vanishes"] is False:
                parts.append(f"{question}: no, {self.petrov_element_tex(d['decided_by'])} does not vanish "
                             f"({self.zero_test_tex(d['test'])})")
            else:
                parts.append(f"{question}: taken as yes on evidence only, "
                             f"{self.petrov_element_tex(d['decided_by'])}: {self.zero_test_tex(d['test'])}")
        tail = ("; the type holds where the quantities found non-zero do not vanish, an open dense set"
                if p.get("generic") else "")
        return "; ".join(parts) + tail

    def given_vector_symbol(self, label: str) -> str:
        """e_(x) for a vector of an orthonormal frame (named after a coordinate), l, n, m of a null tetrad."""
        if label in self.d.metric.names:
            return "e_" + frame_index(label, self.writer)
        return {"l": "l", "n": "n", "m": "m", "mbar": r"\bar m"}.get(label, r"\mathrm{" + escape_text(label) + "}")

    def direction_tex(self, name: str) -> str:
        """A null direction of the trace: a given l or n, d_v (a coordinate vector), du (a gradient)."""
        directions = {}
        for s in self.d.steps:
            if fields(s) == ("check", "", "null directions"):
                directions = s.params.get("directions", {})
        entry = directions.get(name)
        if entry is None:
            return self.given_vector_symbol(name)
        if entry.get("source") == "coordinate vector":
            return rf"\partial_{{{self.sym(entry['coordinate'])}}}"
        return rf"\partial {self.sym(entry['coordinate'])}"

    def given_frame_lines(self, result: dict) -> list[dict]:
        lines = [self.line(rf"{self.given_vector_symbol(label)} = {self.vector_tex(components)}")
                 for label, components in result.get("vectors", {}).items()]
        for label, components in result.get("null_tetrad", {}).items():
            lines.append(self.line(rf"{self.given_vector_symbol(label)} = {self.vector_tex(components)}"))
        return self.flush_together(lines)

    def product_tex(self, product: dict) -> str:
        first, second = (self.given_vector_symbol(product[k]) for k in ("first", "second"))
        return rf"g({first}, {second}) = {product['value']}"

    def null_direction_lines(self, directions: dict) -> list[dict]:
        lines = []
        for name, entry in directions.items():
            x = self.sym(entry["coordinate"])
            if entry["source"] == "coordinate vector":
                lines.append(self.line(rf"g(\partial_{{{x}}}, \partial_{{{x}}}) = g_{{{x}{x}}} = 0"))
            else:
                lines.append(self.line(rf"g^{{{x}{x}}} = 0:\quad k^a = g^{{ab}} \partial_b {x},\quad "
                                       rf"k = {self.vector_tex(entry['upper'])}"))
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

    # [matter.model] (the model stage) -------------------------------------------------
    def model_equation_lines(self, result: dict) -> list[dict]:
        return self.ansatz_equation_lines(result)

    def conservation_symbol(self, coordinate: str) -> str:
        return rf"\nabla_a \mathcal{{T}}^a{{}}_{{{self.sym(coordinate)}}}"

    def model_conservation_lines(self, result: dict) -> list[dict]:
        return self.flush_together([self.eq(self.conservation_symbol(b), value) for b, value in result.items()])

    def model_solution_lines(self, step: Step) -> list[dict]:
        lines = []
        for eq in step.params.get("equations", []):
            tex, long = self.writer.equation(self.writer.inline(eq["lhs"]), eq["rhs"])
            tag = (self.conservation_symbol(eq["component"]) if eq["source"] == "conservation"
                   else self.E(eq["component"]))
            lines.append({"tex": rf"({tag})\qquad " + tex, "long": long})
        return self.flush_together(lines)

    def model_notes(self, step: Step) -> list[str]:
        p, r, w = step.params, step.result, self.writer
        notes = []
        quantity = step.quantity
        if quantity == "model_stress_energy":
            notes.append(rf"Convention: \({step.formula}\).")
            velocity = p.get("velocity")
            if velocity:
                u = self.vector_tex(velocity)
                if p.get("velocity_default"):
                    notes.append(rf"The fluid is at rest along the time coordinate: \(u = {u}\), so that "
                                 r"\(u_a u_b = g_{at}\, g_{bt} / (-g_{tt})\) and \(g_{ab} u^a u^b = -1\).")
                else:
                    notes.append(rf"The declared four-velocity \(u = {u}\) has \(g_{{ab}} u^a u^b = "
                                 rf"{self.value_tex(p.get('normalisation', sympy.Integer(0)))}\).")
            if "potential" in p and "field" in p:
                notes.append(rf"Field \(\phi = {w.inline(p['field'])}\), potential \(V = {self.value_tex(p['potential'])}\).")
            if p.get("field_strength"):
                parts = [rf"F_{{{','.join(self.sym(c) for c in k.split(','))}}} = {self.value_tex(v)}"
                         for k, v in p["field_strength"].items()]
                notes.append(r"Field strength (components with \(a < b\) not listed vanish): \(" + r",\ ".join(parts)
                             + rf"\); invariant \(F_{{cd}}F^{{cd}} = {self.value_tex(p.get('invariant', 0))}\).")
            notes.append(r"Written \(\mathcal{T}_{ab}\) here to tell it from the \(T_{ab}\) the metric requires; "
                         "the components not listed vanish.")
        elif quantity == "model_equation":
            notes += self.ansatz_equation_notes(p)
            lam = p.get("cosmological_constant", sympy.Integer(0))
            notes.append(rf"\(\kappa = {w.inline(p.get('kappa', 8 * sympy.pi))}\)"
                         + ("" if isinstance(lam, sympy.Symbol) else rf", \(\Lambda = {w.inline(lam)}\)") + ".")
        elif quantity == "model_conservation":
            if not r:
                notes.append(r"Every component vanishes identically: the declared matter is conserved for any "
                             "choice of its functions.")
            notes.append("Independent field equations: "
                         + ", ".join(rf"\({self.E(k)} = 0\)" for k in p.get("independent", [])) + ".")
            for key, why in p.get("follows", {}).items():
                sources = ", ".join(rf"\({self.E(k)}\)" for k in why["from"])
                where = ("which is not zero" if why.get("never_vanishes")
                         else "wherever it is not zero")
                notes.append(rf"\({self.E(key)} = 0\) follows from {sources}, their derivatives and "
                             rf"\({self.conservation_symbol(why['bianchi_component'])} = 0\): that component of "
                             rf"\(\nabla^a E_{{ab}} = -\kappa\,\nabla_a \mathcal{{T}}^a{{}}_b\) contains it undifferentiated, "
                             rf"with the coefficient \({self.value_tex(why['coefficient'])}\), {where}.")
        elif quantity == "model_solution":
            for old, new in p.get("definitions", []):
                if old != new:
                    notes.append(rf"Put in: \({w.inline(old)} = {self.value_tex(new)}\).")
            notes.append("Each line is tagged with the equation it solves; "
                         + ("the last is the conservation law with the redshift equation put in."
                            if p.get("shape") == "static star" else
                            "the acceleration equation has the Friedmann equation put in."))
        return notes

    def model_annotation(self, step: Step) -> str:
        p = step.params
        if step.quantity == "model_stress_energy":
            return rf"The stress-energy tensor of the declared {escape_text(p.get('model', 'matter'))}, \(\mathcal{{T}}_{{ab}}\)."
        if step.quantity == "model_equation":
            return (r"The field equations \(E_{ab} = G_{ab} + \Lambda g_{ab} - \kappa\,\mathcal{T}_{ab} = 0\) with the declared "
                    r"matter: each listed equation is a component's numerator with the factors that cannot vanish "
                    r"removed, in the order of their highest derivatives; duplicates and components that vanish "
                    r"identically are named below.")
        if step.quantity == "model_conservation":
            return (r"The conservation law \(\nabla_a \mathcal{T}^a{}_b = 0\), component by component (components not "
                    r"listed vanish identically). The contracted Bianchi identity \(\nabla^a (G_{ab} + \Lambda g_{ab}) = 0\) "
                    r"makes it a consequence of the field equations; with it, some field equations follow from the others.")
        if step.quantity == "model_solution":
            shape = p.get("shape", "")
            if shape == "static star":
                time = self.d.metric.matter.time.name if self.d.metric.matter is not None else "t"
                tt, rr = self.sym(time) * 2, self.sym(p["radial"]) * 2
                return (rf"The structure equations of a static star: the redshift function "
                        rf"\({self.function_tex(p['redshift_function'])}\) with \(-g_{{{tt}}} = e^{{2{self.sym(str(p['redshift_function'].func))}}}\) "
                        rf"and the mass function \({self.function_tex(p['mass_function'])}\) with "
                        rf"\(g_{{{rr}}} = (1 - {self.writer.inline(p['mass_factor'])}\,{self.sym(str(p['mass_function'].func))}/{self.sym(p['radial'])})^{{-1}}\) "
                        r"put in, each equation solved for its derivative; the last line, the conservation law with "
                        r"the redshift equation put in, is the Tolman--Oppenheimer--Volkoff equation.")
            return (r"The expansion equations of a homogeneous universe with scale factor "
                    rf"\({self.function_tex(p['scale_factor'])}\): the Friedmann equation, the acceleration equation "
                    r"(with the Friedmann equation put in) and the continuity equation, each solved for its "
                    r"derivative.")
        return escape_text(step.annotation)

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
        """LaTeX for d(coordinate)/dtau, the contravariant component with an upper index: u^{r}, or
        \\tilde{u}^{r} when the metric already used the name u_r (recorded as uu_r); the index is the
        coordinate as typeset elsewhere."""
        name = self.velocity_name(coordinate)
        prefix = name[:len(name) - len(coordinate) - 1] if name.endswith("_" + coordinate) else "u"
        head = {"u": "u", "uu": r"\tilde{u}"}.get(prefix) or self.sym(prefix)
        return f"{head}^{{{self.sym(coordinate)}}}"

    def symbol_clashes(self) -> dict[str, str]:
        """The report's own symbols (OWN_SYMBOLS) that a name of the metric also prints as, each with the
        metric's name; a symbol that is itself the cosmological constant asked for is no clash."""
        m = self.d.metric
        names = ([x.name for x in m.coordinates] + [p.name for p in m.parameters] + [a for a, _ in m.assumptions]
                 + [f.func.__name__ for f in m.functions] + [a for a, _ in m.abbreviations])
        constants = {request.cosmological_constant for request in (m.matter, m.ansatz) if request is not None}
        clashes = {}
        for name in dict.fromkeys(names):
            tex = self.writer.symbol(name)
            if any(tex == own for own, _, _ in OWN_SYMBOLS) and tex not in clashes:
                if tex == r"\Lambda" and constants and all(getattr(c, "name", None) == name for c in constants):
                    continue  # the metric's Lambda is the cosmological constant itself
                clashes[tex] = name
        return clashes

    def renaming_sentence(self, used: list[str]) -> str:
        """Which of the report's symbols were renamed, and why."""
        functions = {f.func.__name__ for f in self.d.metric.functions}
        coordinates = set(self.d.metric.names)
        parts = []
        for own, words, new in OWN_SYMBOLS:
            if own in used:
                name = self.clashes[own]
                kind = "function" if name in functions else "coordinate" if name in coordinates else "symbol"
                parts.append(rf"the metric's {kind} \({{{own}}}\) is not {words}, which is written \({new}\)")
        return "In this report " + "; ".join(parts) + "."

    def time_coordinate(self) -> sympy.Symbol | None:
        """The coordinate whose derivatives are written with dots: the time the matter's frame or the orbit
        was declared with, else the one coordinate with g_aa < 0 when the declared signs fix the signature,
        else a coordinate named t; None when there is none (primes throughout)."""
        m = self.d.metric
        for request in (m.matter, m.orbit):
            if request is not None and request.time in m.coordinates:
                return request.time
        signs = (self.d.convention_data or {}).get("signature")
        if signs and signs.count("-") == 1 and len(signs) == len(m.coordinates) > 1:
            return m.coordinates[signs.index("-")]
        return next((x for x in m.coordinates if x.name == "t"), None)

    def derivative_sentence(self) -> str:
        """How derivatives of the free functions are written, for the functions this metric has."""
        w, time = self.writer, self.writer.time
        single = [f for f in self.d.metric.functions if len(f.args) == 1]
        dotted = [f for f in single if f.args[0] == time]
        primed = [f for f in single if f.args[0] != time]
        several = [f for f in self.d.metric.functions if len(f.args) > 1]
        parts = []
        if dotted:
            f = dotted[0]
            parts.append(rf"derivatives by the time coordinate \({w.symbol(time.name)}\) are written with dots, "
                         rf"\({w.inline(sympy.Derivative(f, time))} = d{w.symbol(f.func.__name__)}/d{w.symbol(time.name)}\)")
        if primed:
            f = primed[0]
            x = f.args[0]
            lead = "those of other functions of one variable" if parts else \
                "derivatives of functions of one variable are written"
            parts.append(rf"{lead} with primes, \({w.inline(sympy.Derivative(f, x))} = "
                         rf"d{w.symbol(f.func.__name__)}/d{w.inline(x)}\)")
        if several:
            lead = "those of functions of several variables" if parts else \
                "derivatives of functions of several variables are written"
            parts.append(rf"{lead} with \(\partial\) and subscripts")
        return "; ".join(parts) + "." if parts else ""

    def geodesic_lines(self, result: dict) -> list[dict]:
        """dx^a/dtau = u^a for every coordinate, side by side, then one equation per acceleration du^a/dtau
        whose lines break only between whole terms."""
        rates, accelerations = [], []
        for name, acceleration in result.get("velocity", {}).items():
            rates.append(self.line(rf"\frac{{d{self.sym(name)}}}{{d\tau}} = {self.velocity_tex(name)}"))
            lhs = component_symbol("geodesic_acceleration", [name], self.writer)
            tex, long = self.writer.equation(lhs, acceleration, whole_terms=True)
            accelerations.append({"tex": tex, "long": long})
        return self.pack(rates, per_row=4, width=40) + self.flush_together(accelerations)

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
        if step.kind.value == "model":
            notes += self.model_notes(step)
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
        for constant, rescaling in p.get("rescalings", {}).items():
            x = self.sym(rescaling["coordinate"])
            factor = self.writer.inline(rescaling["factor"])
            notes.append(rf"\({self.sym(constant)}\) is removed by rescaling \({x}\): "
                         rf"\({x} \to {x} / \sqrt{{|{factor}|}}\) sets it to \(+1\) or \(-1\), the sign being fixed by "
                         rf"the signature (a local change of coordinates: if \({x}\) is periodic, its period changes).")
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
        if step.kind.value == "model":
            return self.model_annotation(step)
        r = step.result
        if step.kind == "energy condition":
            return self.condition_statement(step.component, step) + "."
        if step.kind == "matter" and isinstance(r, dict):
            if r.get("diagonal"):
                return (r"The stress-energy tensor is diagonal in the frame, so \(\rho\) and the \(p_{(k)}\) are the "
                        r"energy density and the principal pressures measured by the frame's observers.")
            return (r"The stress-energy tensor is not diagonal in the frame: its diagonal entries are listed, but they "
                    r"are not the principal pressures (stepper does not diagonalise \(T\)), and the energy conditions "
                    r"are not decided from them.")
        if fields(step) == ("frame", "null_tetrad", "") and "pairs" in step.params:
            p = step.params
            (T, S), (P, Q) = p["pairs"]["l_n"], p["pairs"]["m"]
            e = {k: "e_" + frame_index(k, self.writer) for k in (T, S, P, Q)}
            how = ("the metric is diagonal, so each \\(w_k\\) is a coordinate direction"
                   if all(len(v) == 1 for v in p["vectors_unnormalised"].values())
                   else "Gram-Schmidt from the coordinate directions, in the order listed")
            signs = ("the declared signs" if p.get("signs_from") == "declared signs"
                     else "their signs at a random point (the tetrad is real where these signs hold)")
            return (rf"Null tetrad built by stepper ({how}): \(e_k = w_k/\sqrt{{|N_k|}}\), "
                    rf"\(l, n = ({e[T]} \pm {e[S]})/\sqrt2\), \(m = ({e[P]} + i\,{e[Q]})/\sqrt2\); "
                    rf"the timelike direction \(w_{frame_index(T, self.writer)}\) is fixed by {signs}. "
                    r"Conventions: \(l \cdot n = -1\), \(m \cdot \bar m = 1\), all other products 0.")
        if fields(step) == ("frame", "", "") and isinstance(r, Verdict) and self.frame_why():
            reason = self.frame_reason_tex(self.frame_why())
            return reason[:1].upper() + reason[1:] + "."
        if fields(step) == ("frame", "", "given"):
            p = step.params
            what = ("an orthonormal frame, its first vector timelike" if p.get("kind") == "orthonormal" else
                    "null vectors of a null tetrad" if p.get("kind") == "null" else "vectors")
            text = f"The metric file gives {what}; here its vectors with upper indices"
            if p.get("index") == "down":
                text += r", the covectors given raised with \(g^{ij}\)"
            if p.get("tetrad_from_frame"):
                text += (r", and the null tetrad \(l = (e_{(0)} + e_{(1)})/\sqrt 2\), \(n = (e_{(0)} - e_{(1)})/\sqrt 2\), "
                         r"\(m = (e_{(2)} + i e_{(3)})/\sqrt 2\) built from it")
            return text + "."
        if fields(step) == ("check", "", "given frame"):
            return ("Each product the vectors must have, in the exact arithmetic (a vector is rational times one "
                    r"square-root factor \(R\), so \(g(e, e') = g(w, w') R R'\) with \(w\) rational; \(m\) is split "
                    "into its real and imaginary vectors).")
        if fields(step) == ("check", "", "null directions"):
            return (r"Null directions read off the metric: a coordinate vector \(\partial_v\) with \(g_{vv} = 0\), and "
                    r"the gradient \(k_a = \partial_a u\) of a coordinate with \(g^{uu} = 0\) (then \(u = \text{const}\) is "
                    r"a null hypersurface, and its normal is null).")
        if fields(step) == ("check", "", "null dust"):
            k = self.direction_tex(step.params.get("direction", ""))
            return (rf"Is the stress-energy that of null dust (pure radiation) along \(k = {k}\), "
                    r"\(T_{ab} = f\, k_a k_b\), with \(f = T_{pp}/k_p^2\) at the first index \(p\) where \(k_p \ne 0\)?")
        if step.kind == "frame" and isinstance(r, dict) and step.params.get("given"):
            return (r"The orthonormal frame of the metric file (checked above), \(e_{(x)} = w_{(x)}/\sqrt{N_{(x)}}\) with "
                    r"\(w_{(x)}\) rational; its first vector is timelike.")
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
        chain = self.chain_annotation(step)
        if chain:
            return chain
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
        if fields(step) == ("ansatz", "ansatz_solution", "properties"):
            kind = ("Ricci-flat, a vacuum solution" if step.params.get("ricci_flat")
                    else "an Einstein space")
            return (r"What the solved metric is: it satisfies \(G_{ij} + \Lambda g_{ij} = 0\), so that "
                    rf"\(R_{{ij}} = \frac{{2\Lambda}}{{n-2}}\, g_{{ij}}\): it is {kind}. Its invariants are the chain's "
                    "with the solution put in.")
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

    def chain_annotation(self, step: Step) -> str:
        """The curvature chain's annotations, typeset; '' for a step that is not one of them."""
        n = self.d.metric.dimension
        if fields(step) == ("verdict", "conformally_flat", "") and n < 4:
            return (r"Conformally flat: the Cotton tensor vanishes, \(\mathcal{C}_{abc} = 0\) (in three dimensions "
                    r"the Weyl tensor vanishes identically)." if n == 3 else
                    "Conformally flat: in two dimensions every metric is locally conformally flat.")
        if fields(step) in CHAIN_ANNOTATIONS:
            return CHAIN_ANNOTATIONS[fields(step)]
        r = step.result
        if fields(step) == ("summary", "christoffel", "") and isinstance(r, dict):
            return (rf"Christoffel symbols of the second kind: {len(r)} of the {n * n * (n + 1) // 2} independent "
                    r"components (\(b \le c\)) are non-zero; the rest vanish, and \(\Gamma^a_{cb} = \Gamma^a_{bc}\).")
        if fields(step) == ("summary", "riemann", "") and isinstance(r, dict):
            return (rf"Riemann tensor: {len(r)} of the {n ** 3 * (n - 1) // 2} components with \(c < d\) are "
                    r"non-zero; the others vanish, and \(R^a{}_{bdc} = -R^a{}_{bcd}\).")
        if step.kind == "identity" and step.quantity == "contracted_christoffel":
            x = self.sym(step.component)
            return (rf"Trace identity along \({x}\): the sum \(\Gamma^l{{}}_{{l{x}}}\) over \(l\), and "
                    rf"\(\partial_{{{x}}} \ln\sqrt{{|g|}}\) from the determinant, agree.")
        if fields(step) == ("verdict", "einstein_space", ""):
            return rf"Einstein manifold: \(R_{{ij}} = \lambda g_{{ij}}\) with \(\lambda = R/{n}\)."
        return ""

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

    def condition_statement(self, key: str, step: Step | None = None) -> str:
        """An energy condition in words and symbols (for null dust or null vectors, as a statement on vectors)."""
        route = step.params.get("route") if step is not None else None
        if route:
            return {
                "null": r"\textbf{Null energy condition}: \(T_{ab}\, l^a l^b \ge 0\) for every null vector \(l\)",
                "weak": r"\textbf{Weak energy condition}: \(T_{ab}\, t^a t^b \ge 0\) for every timelike vector \(t\)",
                "strong": (r"\textbf{Strong energy condition}: \((T_{ab} - \frac{T}{n-2} g_{ab})\, t^a t^b \ge 0\) for every "
                           r"timelike vector \(t\)"),
                "dominant": (r"\textbf{Dominant energy condition}: \(T_{ab}\, t^a t^b \ge 0\) and \(-T^a{}_b\, t^b\) "
                             r"causal and future-pointing for every future-pointing timelike \(t\)"),
            }.get(key, escape_text(key))
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

    def row_inequality_tex(self, label: str, row: dict) -> str:
        """An inequality of a condition's table: from its symbol data when it has one (null dust, a null
        vector), else from its label."""
        symbol = row.get("symbol")
        if isinstance(symbol, dict) and symbol.get("kind") == "null dust density":
            return r"f \ge 0"
        if isinstance(symbol, dict) and symbol.get("kind") == "contraction":
            k = self.direction_tex(symbol.get("direction", ""))
            return rf"T_{{ab}}\, k^a k^b \ge 0,\ k = {k}"
        return self.inequality_tex(label)

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
            out.append({"inequality": self.row_inequality_tex(label, row),
                        "value": self.value_tex(row["value"], CELL_WIDTH),
                        "outcome": self.outcome_tex(row)})
        return {"rows": out}

    def condition_summary(self, step: Step) -> str:
        """Why an energy condition holds, fails or is undecided, in words, from its rows (no final period)."""
        result = step.result
        rows = step.params.get("inequalities", {})
        if not rows:
            return self.evidence_tex(step)
        route = step.params.get("route")
        if route == "null dust":
            k = self.direction_tex(step.params.get("direction", ""))
            row = next(iter(rows.values()))
            reduction = {"null": r"\(T_{ab}\, l^a l^b = f\,(k \cdot l)^2\) for every null \(l\)",
                         "weak": r"\(T_{ab}\, t^a t^b = f\,(k \cdot t)^2\) with \(k \cdot t \ne 0\) for every timelike \(t\)",
                         "strong": r"\(T = 0\), so the left-hand side is \(f\,(k \cdot t)^2\)",
                         "dominant": (r"\(T_{ab}\, t^a t^b = f\,(k \cdot t)^2\) and \(-T^a{}_b t^b = -f\,(k \cdot t)\, k^a\) "
                                      r"is null, future-pointing exactly when \(f \ge 0\)")}.get(step.component, "")
            return (rf"the stress-energy is null dust along \(k = {k}\): {reduction}, so the condition holds exactly "
                    r"when \(f \ge 0\), and \(f \ge 0\) " + self.outcome_parts(row)[2])
        if route == "null vectors" and result.holds is None and all(r["holds"] for r in rows.values()):
            return (rf"\(T_{{ab}}\, k^a k^b \ge 0\) is proven along each of the {len(rows)} null vectors listed, but the "
                    "condition asks it of every null vector, and the stress-energy is not null dust along any of them: "
                    "not decided")
        if result.holds is True:
            return "every inequality is proven"
        wanted = False if result.holds is False else None
        for label, row in rows.items():
            if row["holds"] is wanted:
                return rf"\({self.row_inequality_tex(label, row)}\) " + self.outcome_parts(row)[2]
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

    def riemann_groups(self, step: Step) -> list[dict]:
        """A Riemann component's terms grouped by the Christoffel symbols they come from, each with its
        simplified value: the derivative terms, then each sum of products over the repeated index."""
        out = []
        w = self.writer
        for group in step.params.get("groups", []):
            sign = "-" if group["sign"] < 0 else ""
            if group["kind"] == "derivative":
                gamma = component_symbol("christoffel", group["christoffel"].split(","), w)
                lhs = rf"{sign}\partial_{{{self.sym(group['by'])}}} {gamma}"
            else:
                products = [r"\,".join(component_symbol("christoffel", k.split(","), w) for k in pair)
                            for pair in group["pairs"]]
                lhs = sign + (products[0] if len(products) == 1 else r"\left(" + " + ".join(products) + r"\right)")
            value = group["value"] if group["sign"] > 0 else -group["value"]
            tex, long = w.equation(lhs, value)
            out.append({"tex": tex, "long": long})
        return out

    def verdict_statement(self, step: Step) -> str:
        if step.kind == "energy condition":
            return self.condition_statement(step.component, step)
        if fields(step) == ("verdict", "einstein_space", ""):
            return rf"Einstein manifold: \(R_{{ij}} = \lambda g_{{ij}}\) with \(\lambda = R/{self.d.metric.dimension}\)"
        if fields(step) == ("verdict", "conformally_flat", "") and self.d.metric.dimension == 3:
            return r"Conformally flat: the Cotton tensor vanishes, \(\mathcal{C}_{abc} = 0\)"
        if fields(step) == ("verdict", "conformally_flat", "") and self.d.metric.dimension < 4:
            return "Conformally flat"
        return (STATEMENTS.get(fields(step)) or CHAIN_STATEMENTS.get(fields(step))
                or escape_text(step.result.statement))

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

    def frame_why(self) -> dict | None:
        """Why no frame was built, as recorded data (None when a frame was built or the trace predates it)."""
        frame = self.d.results.get("frame", {})
        why = frame.get("why") if isinstance(frame, dict) and not frame.get("built") else None
        return why if isinstance(why, dict) and why.get("kind") else None

    def frame_reason_tex(self, why: dict) -> str:
        """Why no frame was built, typeset from its data."""
        kind, t = why.get("kind"), self.sym(why.get("time", ""))
        if kind == "null slices":
            return (rf"no frame is built: \(g^{{{t}{t}}}\) vanishes identically, so the hypersurfaces "
                    rf"\({t} = \text{{const}}\) are null and have no normal observers")
        if kind == "null direction":
            x = self.sym(why.get("direction", ""))
            return (rf"no frame is built: the direction \(\partial_{{{x}}}\) has zero norm after Gram--Schmidt (it "
                    rf"is null within \({t} = \text{{const}}\))")
        if kind == "not positive":
            x = self.sym(why.get("direction", ""))
            return (rf"no frame is built: the squared norm \(N_{{({x})}} = {self.value_tex(why.get('norm', 0))}\) is "
                    r"never positive for the declared signs (stepper's frame needs the signature "
                    rf"\((-, +, \dots, +)\) with \({t}\) timelike; set the time of the matter table, or write the "
                    r"metric with that signature)")
        return "no frame is used: the orthonormal frame given in the metric file is not orthonormal"

    def evidence_tex(self, step: Step) -> str:
        """A verdict's evidence as LaTeX text, typeset from the step's fields (the trace keeps the plain-text
        sentence for the terminal)."""
        verdict, p = step.result, step.params
        why = self.frame_why()
        if why and (fields(step) == ("frame", "", "") or (fields(step) == ("verdict", "perfect_fluid", "") and verdict.holds is None
                                             and not p) or (step.kind == "energy condition" and not p.get("inequalities"))):
            return self.frame_reason_tex(why)
        if fields(step) == ("verdict", "perfect_fluid", "") and "residue" in p:
            residue = self.residue_tex(p["residue"])
            if verdict.holds is False:
                return residue + " is not zero; a fluid moving relative to these observers is not tested"
            return residue + ": " + self.zero_test_tex(p.get("test", {}))
        if fields(step) == ("verdict", "perfect_fluid", "") and verdict.holds and p.get("vacuum"):
            return r"trivially: \(T_{ij}\) vanishes (vacuum), a perfect fluid with \(\rho = p = 0\)"
        if fields(step) == ("verdict", "perfect_fluid", "") and verdict.holds:
            return f"each of the {p['checked']} conditions checked vanishes exactly"
        if fields(step) == ("verdict", "trace_free", "") and "trace" in p:
            if verdict.holds is False:
                return rf"the trace \(T^i{{}}_i = {self.value_tex(p['trace'])}\) is not zero"
            if verdict.holds:
                return rf"the trace \(T^i{{}}_i\) vanishes ({self.zero_test_tex(p.get('test', {}))})"
            return (rf"the trace \(T^i{{}}_i = {self.value_tex(p['trace'])}\) is not proven zero: "
                    + self.zero_test_tex(p.get("test", {})))
        if fields(step) == ("verdict", "algebraic_type", ""):
            return self.petrov_evidence_tex(step)
        if step.kind == "verdict" and "checked" in p and step.stage == "curvature":
            return self.curvature_verdict_tex(step)
        if step.kind == "check" and ("count" in p or "checked" in p):
            return self.check_evidence_tex(step)
        if step.kind == "numeric check":
            return self.numeric_evidence_tex(step)
        return breakable_text(verdict.evidence)

    # evidence typeset from the step's data --------------------------------------
    @staticmethod
    def scientific_tex(value: float) -> str:
        """A float in LaTeX to three digits (7.91e-32 as 7.91 times 10 to the -32)."""
        mantissa, _, exponent = f"{value:.3g}".partition("e")
        if not exponent:
            return mantissa
        return rf"{mantissa} \times 10^{{{int(exponent)}}}"

    def zero_test_tex(self, test: dict) -> str:
        """How a zero test decided, in words (see algebra.ZeroTest.as_data)."""
        how = test.get("how", "")
        if how == "canonical form":
            return ("its canonical rational form is 0" if test.get("vanishes")
                    else "its canonical rational form has a non-zero numerator")
        if how == "cancel":
            return "sympy's cancel reduces it to 0"
        if how == "simplify":
            return "sympy's simplify reduces it to 0"
        if how == "sampled":
            return (f"it vanishes at {test['points']} random points to {test['digits']} digits, but is not proven "
                    "zero symbolically")
        if how == "no point":
            return "sympy's simplify does not reduce it to 0, and no sample point could be evaluated"
        if how == "point":
            return rf"it is non-zero at a random point (\(|\text{{value}}| \approx {self.scientific_tex(test['magnitude'])}\))"
        return "undecided"

    def verdict_residue_tex(self, kind: str, component: str) -> str:
        """The residue a curvature verdict tests (R_tt - lambda g_tt, say), as inline math."""
        names = component.split(",") if component else []
        w = self.writer
        if kind == "ricci":
            return component_symbol("ricci", names, w)
        if kind == "einstein_space":
            return rf"{component_symbol('ricci', names, w)} - \lambda\, {component_symbol('metric', names, w)}"
        if kind == "constant_curvature":
            a, b, c, d = names
            g = lambda i, j: component_symbol("metric", [i, j], w)  # noqa: E731
            return (rf"{component_symbol('riemann_lowered', names, w)} - k\,"
                    rf"({g(a, c)} {g(b, d)} - {g(a, d)} {g(b, c)})")
        if kind == "derivative_of_k":
            return rf"\partial_{{{w.symbol(component)}}} k"
        if kind == "weyl":
            return component_symbol("weyl", names, w)
        if kind == "cotton":
            return component_symbol("cotton", names, w)
        if kind == "divergence":
            return rf"\nabla^a G_{{a{w.symbol(component)}}}"
        return ""

    def curvature_verdict_tex(self, step: Step) -> str:
        """Evidence of a curvature verdict (Ricci-flat, Einstein, constant curvature, conformally flat, Bianchi)."""
        verdict, p = step.result, step.params
        constants = []
        if "lambda" in p:
            constants.append(rf"\(\lambda = R/{self.d.metric.dimension} = {self.value_tex(p['lambda'])}\)")
        if "k" in p:
            constants.append(rf"\(k = {self.value_tex(p['k'])}\)")
        if verdict.holds is False and "residue" in p:
            r = p["residue"]
            residue = self.verdict_residue_tex(r["kind"], r["component"])
            value = self.value_tex(r["value"])
            text = rf"\({residue}\) is not zero: it equals \({value}\)"
            if r.get("test", {}).get("how") == "point":
                text += " (" + self.zero_test_tex(r["test"]) + ")"
            return text
        if verdict.holds is None and p.get("undecided"):
            shown = p["undecided"][0]
            more = len(p["undecided"]) - 1
            return (rf"not proven symbolically: for \({self.verdict_residue_tex(shown['kind'], shown['component'])}\), "
                    + self.zero_test_tex(shown["test"])
                    + (f"; {more} more residue{'s' if more > 1 else ''} likewise" if more else ""))
        how = "its canonical rational form is 0" if p.get("test") == "canonical form" else "sympy reduces it to 0"
        text = f"each of the {p['checked']} components checked vanishes ({how})"
        if constants:
            text += "; " + ", ".join(constants)
        if step.quantity == "einstein_space" and self.d.metric.dimension == 2:
            text += (r"; in two dimensions every metric satisfies \(R_{ij} = \tfrac12 R\, g_{ij}\)"
                     + {False: r", and here \(\lambda\) is not constant: this is that identity, not an Einstein "
                               r"space with a constant \(\lambda\) (the surface does not have constant curvature)",
                        True: r", and here \(\lambda\) is constant: a surface of constant curvature",
                        None: ""}[p.get("lambda_constant")])
        return text

    def check_evidence_tex(self, step: Step) -> str:
        """Evidence of an identity check: what its residues are and how they were tested."""
        verdict, p = step.result, step.params
        what = CHECK_RESIDUES.get(fields(step), "the residues")
        count = p.get("count", p.get("checked", 0))
        test = p.get("test", {})
        if verdict.holds is False:
            if fields(step) == ("check", "ansatz_solution", "") and "residue" in p:
                r = p["residue"]
                return (rf"\({self.E(r['component'])} = {self.value_tex(r['value'])}\) with the solution put in, "
                        "which is not zero")
            return f"{what}: one is not zero ({self.zero_test_tex(test)})"
        if verdict.holds is None:
            undecided = p.get("undecided", 0)
            undecided = len(undecided) if isinstance(undecided, list) else undecided
            text = f"{what}: {undecided} of {count} not proven symbolically"
            if isinstance(test, dict) and test:
                text += f" ({self.zero_test_tex(test)})"
            elif p.get("undecided") and isinstance(p["undecided"], list):
                text += f" ({self.zero_test_tex(p['undecided'][0]['test'])})"
            return text + self.free_unknowns_tex(p)
        return f"{what}: {self.check_outcome_tex(True, count)}" + self.free_unknowns_tex(p)

    def free_unknowns_tex(self, p: dict) -> str:
        free = p.get("free_unknowns", [])
        if not free:
            return ""
        return "; the unknowns " + ", ".join(rf"\({self.function_tex(f)}\)" for f in free) + " remain free"

    def numeric_evidence_tex(self, step: Step) -> str:
        """The numeric cross-check's evidence: largest deviations per quantity, points, digits, tolerance."""
        p = step.params
        points = len(p.get("points", []))
        if not points:
            return "no random point of the domain could be evaluated, so nothing was compared"
        deviations = ", ".join(rf"{NUMERIC_NAMES.get(q, escape_text(q))} \({self.scientific_tex(float(v))}\)"
                               for q, v in p.get("deviations", {}).items())
        return (f"largest relative deviations at {points} random points, computed to {p['digits']} digits: "
                + deviations + rf" (tolerance \({self.scientific_tex(float(p['tolerance']))}\))")

    def method_tex(self, step: Step) -> str:
        """How the determinant or the inverse was computed, from the step's blocks."""
        blocks = step.params.get("blocks")
        if not blocks:
            return escape_text(step.params.get("method", ""))
        if all(len(b) == 1 for b in blocks):
            return ("diagonal: the product of the diagonal components" if step.kind == "determinant"
                    else r"diagonal: \(g^{ii} = 1/g_{ii}\)")
        if len(blocks) > 1:
            shown = "; ".join(r"\((" + ", ".join(self.sym(x) for x in b) + r")\)" for b in blocks)
            return (f"block diagonal: the product of the determinants of the blocks {shown}"
                    if step.kind == "determinant" else
                    f"block diagonal (blocks {shown}): each block inverted as its adjugate over its determinant")
        return ("general: expansion by minors" if step.kind == "determinant"
                else "general: the adjugate over the determinant")

    def step_name(self, step: Step) -> str:
        """A short typeset name of a step for lists of links (its id stays in the trace)."""
        if step.kind == "component" and step.quantity in QUANTITIES:
            return rf"\({component_symbol(step.quantity, step.component.split(','), self.writer)}\)"
        if step.kind == "verdict" and step.quantity in VERDICTS:
            return escape_text(VERDICTS[step.quantity].label)
        if step.kind == "check":
            return "check " + (CHAIN_STATEMENTS.get(fields(step)) or STATEMENTS.get(fields(step)) or "")
        if step.kind == "identity" and step.quantity == "contracted_christoffel":
            return rf"trace identity along \({self.sym(step.component)}\)"
        if step.kind == "claim":
            return f"claim {step.params.get('number', '')}"
        if step.quantity in QUANTITIES:
            return escape_text(QUANTITIES[step.quantity].words)
        return escape_text(str(step.kind))

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
            "name": self.step_name(step),
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
            "groups": self.riemann_groups(step),
            "uses": [self.link(u) for u in step.uses],
            "verdict": verdict,
            "params": {k: (self.method_tex(step) if k == "method" else escape_text(v)) for k, v in step.params.items()
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
            if frame.get("built") and frame.get("given"):
                text.append(r"The energy density \(\rho\) and the pressures \(p_{(k)}\) are measured in the orthonormal "
                            r"frame given in the metric file, whose first vector is the observers' 4-velocity.")
            elif frame.get("built"):
                text.append(r"The energy density \(\rho\) and the pressures \(p_{(k)}\) are what observers at rest on "
                            rf"\({self.sym(frame.get('time', ''))} = \text{{const}}\) measure, in their orthonormal "
                            r"frame.")
            elif frame and self.frame_why():
                reason = self.frame_reason_tex(self.frame_why())
                text.append(reason[:1].upper() + reason[1:] + ".")
            elif frame:
                reason = frame.get("reason", "no orthonormal frame is built")
                text.append(breakable_text(reason[:1].upper() + reason[1:]) + ".")
            return text
        if key == "energy":
            text = [(r"Each condition is a set of inequalities in \(\rho\) and the \(p_{(k)}\); the tables list the "
                     r"values of their left-hand sides themselves. Each is \textbf{proven} from the declared signs of the "
                     r"symbols and free functions (or because it vanishes identically), \textbf{violated} (everywhere, or at an exact point "
                     r"of the sampling region, which is a counterexample), or \textbf{undecided}, with the reason; "
                     r"non-negative values at every sampled point are evidence, not proof.")]
            region = next((s.params.get("region") for s in self.d.steps
                           if s.kind == "energy condition" and s.params.get("region")), None)
            if region:
                text.append("Sampling region: " + self.region_tex(region) + ", where every squared norm "
                            r"\(N_{(x)}\) of the frame is positive.")
            if any(s.kind == "energy condition" and s.params.get("route") for s in self.d.steps):
                text.append(r"Where no frame gives \(\rho\) and the \(p_{(k)}\), the conditions are read along null "
                            r"vectors: when \(T_{ab} = f\, k_a k_b\) with \(k\) null (null dust), every condition holds "
                            r"exactly when \(f \ge 0\); otherwise \(T_{ab}\, k^a k^b < 0\) along a known null vector "
                            r"violates the null condition, while \(\ge 0\) along a few of them decides nothing.")
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
            return [(rf"The velocity components are the contravariant components \(u^a = dx^a/d\tau\), written "
                     rf"\({self.velocity_tex(example)} = d{self.sym(example)}/d\tau\) and so on, with the coordinate as an "
                     r"upper index. \(\tau\) is the proper time along a timelike geodesic, an affine parameter along "
                     r"a null one.")]
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
            "derivatives": self.derivative_sentence(),
            "abbreviations": [{"tex": w.definition(name, value)} for name, value in m.abbreviations],
            "line_element": breakable_text(m.line_element) if m.line_element else "",
            "components": [{"tex": tex, "long": long}
                           for tex, long in mapping_lines(self.d.results["metric"], "metric", w)],
            "arithmetic": escape_text(self.d.arithmetic_description) + self.slow_path_text(),
            "signature": self.signature_text(),
        }

    def slow_path_text(self) -> str:
        """Why the exact field was not used (the metric step's ``slow_path_because``), as a clause; empty when it was."""
        slow = next((s.params["slow_path_because"] for s in self.d.steps
                     if s.quantity == "metric" and "slow_path_because" in s.params), None)
        if not slow:
            return ""
        where = f": \\({self.writer.inline(slow['expression'])}\\)" if "expression" in slow else ""
        return f" (the exact field was not used because of {escape_text(slow['reason'])}{where})"

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

    def solved_metric_evidence(self, properties: dict) -> str:
        """One line on the solved metric: why it is Ricci-flat or Einstein, and its invariants."""
        constant = properties["einstein_constant"]
        text = (r"it satisfies every field equation \(G_{ij} + \Lambda g_{ij} = 0\), so "
                + (r"\(R_{ij} = 0\)" if constant == 0 else rf"\(R_{{ij}} = {self.writer.inline(constant)}\, g_{{ij}}\)"))
        invariants = [rf"\({lhs} = {self.value_tex(properties[key])}\)"
                      for lhs, key in (("R", "scalar"), ("K", "kretschmann")) if key in properties]
        return text + ("; " + ", ".join(invariants) if invariants else "")

    def compact_conventions(self) -> str:
        """The conventions a reader needs before the results, in one paragraph: signature, Riemann sign,
        Ricci contraction, Einstein tensor, and the field equations with their units when there is matter."""
        parts = [self.signature_text().rstrip(".")] if self.signature_text() else []
        parts += [r"\(R^a{}_{bcd} = \partial_c \Gamma^a_{db} - \partial_d \Gamma^a_{cb} + \Gamma^a_{ce}\Gamma^e_{db} "
                  r"- \Gamma^a_{de}\Gamma^e_{cb}\) (a round sphere has \(R > 0\))",
                  r"\(R_{bd} = R^a{}_{bad}\)", r"\(R = g^{bd} R_{bd}\)",
                  r"\(G_{ij} = R_{ij} - \tfrac12 R\, g_{ij}\)"]
        field = self.d.conventions_latex.get("Field equations")
        if field:
            parts.append("field equations " + field.rstrip("."))
        return "; ".join(parts) + "."

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
        if self.has("algebraic_type") and isinstance(self.d.step("algebraic_type").result, Verdict):
            step = self.d.step("algebraic_type")
            kind = step.params.get("type")
            verdicts.append({"label": "Algebraic (Petrov) type of the Weyl tensor",
                             "word": f"type {kind}" + (" (on evidence only)" if step.result.holds is None else "")
                             if kind else "undecided", "holds": step.result.holds,
                             "evidence": self.evidence_tex(step), "link": self.link("algebraic_type")})
        for key in ENERGY_CONDITIONS:
            step_id = f"energy_conditions/{key}"
            if self.has(step_id):
                step = self.d.step(step_id)
                verdicts.append({"label": f"{key.capitalize()} energy condition",
                                 "word": _condition_word(step.result.holds), "holds": step.result.holds,
                                 "evidence": self.condition_summary(step), "link": self.link(step_id)})
        properties = r.get("ansatz", {}).get("properties")
        if properties and self.has("ansatz/properties"):
            verdicts.append({"label": "The solved metric",
                             "word": "Ricci-flat" if properties["einstein_constant"] == 0 else "an Einstein space",
                             "holds": True, "evidence": self.solved_metric_evidence(properties),
                             "link": self.link("ansatz/properties")})
        if self.has("ansatz/check") and isinstance(self.d.step("ansatz/check").result, Verdict):
            check = self.d.step("ansatz/check").result
            verdicts.append({"label": "The ansatz solution satisfies every field equation",
                             "word": _verdict_word(check.holds), "holds": check.holds,
                             "evidence": self.evidence_tex(self.d.step("ansatz/check")),
                             "link": self.link("ansatz/check")})
        elif self.has("ansatz/solution") and isinstance(self.d.step("ansatz/solution").result, Verdict):
            unsolved = self.d.step("ansatz/solution").result
            verdicts.append({"label": "The ansatz equations are solved", "word": _verdict_word(unsolved.holds),
                             "holds": unsolved.holds, "evidence": breakable_text(unsolved.evidence),
                             "link": self.link("ansatz/solution")})
        counts = []
        for quantity, label in (("christoffel", r"Christoffel symbols \(\Gamma^a_{bc}\)"),
                                ("riemann", r"Riemann components \(R^a{}_{bcd}\)"),
                                ("ricci", r"Ricci components \(R_{ij}\)"), ("einstein", r"Einstein components \(G_{ij}\)"),
                                ("weyl", r"Weyl components \(C_{abcd}\) (independent ones only)"),
                                ("cotton", r"Cotton components \(\mathcal{C}_{abc}\) (every ordering)"),
                                ("stress_energy", r"stress-energy components \(T_{ij}\)")):
            if quantity in r:
                step_id = QUANTITIES[quantity].step_id
                counts.append({"label": label, "count": len(r[quantity]),
                               "link": self.link(step_id) if self.has(step_id) else None})
        numeric = r.get("numeric_verification")
        numeric_line = None
        if numeric:
            numeric_line = {
                "word": {True: "passed", False: "FAILED", None: "not done"}[numeric["passed"]],
                "deviations": ", ".join(rf"{NUMERIC_NAMES.get(q, escape_text(q))} \({self.scientific_tex(float(v))}\)"
                                        for q, v in numeric["deviations"].items()),
                "points": len(numeric["points"]), "digits": numeric["digits"],
                "tolerance": rf"\({self.scientific_tex(float(numeric['tolerance']))}\)",
                "link": self.link("numeric_verification")}
        matter_intro = ("The matter the metric requires, a perfect fluid at rest in the frame:" if fluid else
                        "The matter the metric requires, as measured in the orthonormal frame:")
        if not fluid and not r.get("frame_diagonal", True):
            matter_intro = ("The stress-energy tensor is not diagonal in the orthonormal frame, so its diagonal "
                            "entries below are not the energy density and principal pressures:")
        if "stress_energy" in r and not r["stress_energy"]:
            matter = [self.line("T_{ij} = 0")]
            matter_intro = "The metric requires no matter: every component of the stress-energy tensor vanishes (vacuum)."
        return {"conventions": self.compact_conventions(),
                "equations": rows, "matter": matter if fluid is None else self.pack(matter),
                "matter_intro": matter_intro,
                "solution": self.pack(solution), "verdicts": verdicts, "counts": counts,
                "numeric": numeric_line, **self.model_summary()}

    def model_summary(self) -> dict:
        """The declared matter's equations in textbook form for page one ([matter.model]), with their step."""
        if not self.has("model/solved"):
            return {"model": [], "model_intro": ""}
        step = self.d.step("model/solved")
        what = {"static star": "The structure equations of the declared static star",
                "homogeneous universe": "The expansion equations of the declared homogeneous universe"}
        intro = what.get(step.params.get("shape", ""), "The declared matter's equations")
        return {"model": self.model_solution_lines(step), "model_intro": intro, "model_link": self.link("model/solved")}

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

    def claim_words(self, quantity: str, component: str, positions: str = "") -> str:
        """What a claim is about in words, from the registry: its quantity, and the index positions of a
        tensor's member that the registry's words would name by a symbol (T^i_j); with the component's
        coordinates typeset when the claim has no symbol."""
        q = QUANTITIES[quantity]
        if quantity == "pressure":
            words = "pressure"
        elif positions or (q.tensor and q.name != q.tensor and q.tensor != "metric"):
            words = f"{QUANTITIES[q.tensor or quantity].words} with {position_words(positions or q.positions)}"
        else:
            words = q.words
        words = escape_text(words)
        if component and not self.claim_symbol(quantity, component, positions):
            words += " for " + ", ".join(rf"\({self.sym(n)}\)" for n in component.split(","))
        return words

    def slip_tex(self, slip: dict, symbol: str = "") -> str:
        """The diagnosis typeset from the slip's data (the audit's words are the plain-text version): one
        method per kind of slip, ``slip_<kind>``; ``symbol`` is the claim's typeset symbol ('' for none)."""
        kinds = ("index_position", "metric_factor", "correct_is_zero", "claim_is_zero", "none", "sign_flip", "factor",
                 "kappa_missing", "einstein_only", "lambda_missing", "kappa_twice", "cross_terms_once",
                 "swapped_indices", "other_direction", "density_for_pressure")
        kind = slip.get("kind")
        return getattr(self, f"slip_{kind}")(slip, symbol or "X") if kind in kinds else ""

    def slip_metric_factor(self, slip: dict, symbol: str) -> str:
        table, key = slip["factor"]
        g = component_symbol(table, key.split(","), self.writer)
        words = "inverse-metric" if table == "inverse_metric" else "metric"
        return rf"off by a factor of the {words} component \({g}\): the claim is \({g}\) times the correct value"

    def slip_index_position(self, slip: dict, symbol: str) -> str:
        w = self.writer
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

    def slip_correct_is_zero(self, slip: dict, symbol: str) -> str:
        return r"the correct value is \(0\): this component vanishes"

    def slip_claim_is_zero(self, slip: dict, symbol: str) -> str:
        return r"the claim says \(0\), but this component does not vanish"

    def slip_none(self, slip: dict, symbol: str) -> str:
        return "no typical slip explains the difference"

    def slip_sign_flip(self, slip: dict, symbol: str) -> str:
        return "a sign flip: the claim is minus the correct value" + self.sign_hint_tex(slip.get("hint", ""))

    def sign_hint_tex(self, hint: str) -> str:
        """What would explain a sign flip, by the hint the audit recorded ('' for none)."""
        curvature = "; an opposite sign convention for the Riemann or Ricci tensor would explain it"
        time = self.d.results.get("frame", {}).get("time") or self.d.metric.names[0]
        t = "{" + self.sym(time) + "}"
        return {
            "riemann_formula": (r"; an overall sign convention for the Riemann tensor opposite to this derivation's "
                                r"(\(R^a{}_{bcd} = \partial_c \Gamma^a_{db} - \dots\)) would explain it"),
            "riemann_sign": "; an overall sign convention for the Riemann tensor opposite to this derivation's "
                            "would explain it",
            "ricci_contraction": (r"; contracting the Riemann tensor on its last index (\(R_{bd} = R^a{}_{bda}\)) "
                                  r"instead of the third, or the opposite Riemann sign, would explain it"),
            "curvature_sign": curvature,
            "curvature_sign_or_signature": (curvature + r", and so would a metric of the opposite signature "
                                                        r"(which flips \(T^i{}_j\) but not \(T_{ij}\))"),
            "density_from_mixed": (rf"; reading \(\rho\) off the mixed component \(T^{t}{{}}_{t}\), which is "
                                   rf"\(-\rho\) for observers at rest, would explain it"),
            "tension": (r"; a tension (\(\tau = -p\), as for the radial stress of a wormhole throat) written as a "
                        r"pressure would explain it"),
            "geodesic_minus": r"; the minus sign of \(du^a/d\tau = -\Gamma^a_{bc}\,u^b u^c\) was lost",
        }.get(hint, "")

    def slip_factor(self, slip: dict, symbol: str) -> str:
        ratio = slip["ratio"]
        if ratio == 2:
            return r"an extra factor of \(2\): the claim is twice the correct value"
        if ratio == sympy.Rational(1, 2):
            return (r"a missing factor of \(2\): the claim is half the correct value (a lost \(\tfrac12\) is a "
                    r"common cause)")
        shown = self.writer.inline(ratio)
        if ratio in (-2, sympy.Rational(-1, 2)):
            return rf"a sign flip and a factor of \(2\): the claim is \({shown}\) times the correct value"
        return rf"off by a constant factor: the claim is \({shown}\) times the correct value"

    # the matter slips: the field equations G + Lambda g = kappa T used wrongly
    def kappa_tex(self, slip: dict) -> tuple[str, str]:
        """kappa as it is written in a matter slip (8 pi, or kappa), and what to add when it is kappa."""
        kappa = slip["kappa"]
        if kappa == 8 * sympy.pi:
            return r"8\pi", ""
        return r"\kappa", rf", with \(\kappa = {self.writer.inline(kappa)}\)"

    @staticmethod
    def inverse_tex(k: str) -> str:
        """1/(8 pi) or 1/kappa."""
        return r"1/\kappa" if k == r"\kappa" else f"1/({k})"

    def einstein_tex(self, slip: dict, head: str = "G") -> str:
        """The Einstein component of a matter slip (``head`` "g" or "eta": the metric in the same place)."""
        positions, names = slip["einstein"]["positions"], slip["einstein"]["component"].split(",")
        if positions == "ff":
            frame = "".join(frame_index(n, self.writer) for n in names)
            return ("G" if head == "G" else r"\eta") + "_{" + frame + "}"
        return component_symbol("einstein" if head == "G" else "metric", names, self.writer, positions)

    def slip_kappa_missing(self, slip: dict, symbol: str) -> str:
        k, where = self.kappa_tex(slip)
        G = self.einstein_tex(slip)
        if slip.get("lambda"):
            sum_tex = rf"{G} + \Lambda\,{self.einstein_tex(slip, 'g')}"
            return (rf"a missing \({self.inverse_tex(k)}\): the claim is \({k}\) times the correct value, that is \({sum_tex}\) "
                    rf"instead of \({symbol} = \frac{{1}}{{{k}}}\left({sum_tex}\right)\){where}")
        return (rf"a missing \({self.inverse_tex(k)}\): the claim is \({k}\) times the correct value, that is the Einstein tensor "
                rf"component \({G}\) instead of \({symbol} = \frac{{1}}{{{k}}}\,{G}\){where}")

    def slip_einstein_only(self, slip: dict, symbol: str) -> str:
        k, where = self.kappa_tex(slip)
        return (rf"the claim is the Einstein tensor component \({self.einstein_tex(slip)}\): both the factor "
                rf"\({self.inverse_tex(k)}\) and the cosmological-constant term \(\Lambda\,{self.einstein_tex(slip, 'g')}\) are "
                rf"missing{where}")

    def slip_lambda_missing(self, slip: dict, symbol: str) -> str:
        k, where = self.kappa_tex(slip)
        G, g = self.einstein_tex(slip), self.einstein_tex(slip, "g")
        return (rf"the cosmological-constant term is missing: the claim is \(\frac{{1}}{{{k}}}\,{G}\) instead of "
                rf"\(\frac{{1}}{{{k}}}\left({G} + \Lambda\,{g}\right)\) (the field equations are "
                rf"\(G_{{ij}} + \Lambda g_{{ij}} = \kappa T_{{ij}}\)){where}")

    def slip_kappa_twice(self, slip: dict, symbol: str) -> str:
        k, where = self.kappa_tex(slip)
        return rf"divided by \({k}\) once too often: the claim is the correct value divided by \({k}\){where}"

    def slip_cross_terms_once(self, slip: dict, symbol: str) -> str:
        a = "{" + self.sym(slip["direction"]) + "}"
        if slip.get("sign_lost"):
            return (r"the cross terms with \(b \ne c\) are counted once and the overall minus sign is lost")
        return (rf"the cross terms \(\Gamma^{a}_{{bc}}\,u^b u^c\) with \(b \ne c\) are counted once; summing "
                rf"over all \(b\) and \(c\) counts each twice (\(\Gamma^{a}_{{bc}} = \Gamma^{a}_{{cb}}\))")

    def slip_swapped_indices(self, slip: dict, symbol: str) -> str:
        quantity, positions = slip["quantity"], slip.get("positions", "")
        other = component_symbol(quantity, slip["other"].split(","), self.writer, positions)
        this = component_symbol(quantity, slip["component"].split(","), self.writer, positions)
        return rf"swapped indices: the claim equals the component \({other}\) rather than \({this}\)"

    def slip_other_direction(self, slip: dict, symbol: str) -> str:
        quantity = slip["quantity"]
        other = component_symbol(quantity, [slip["direction"]], self.writer)
        this = component_symbol(quantity, [slip["component"]], self.writer)
        return (rf"the claim is the value for the direction \({self.sym(slip['direction'])}\), \({other}\), "
                rf"not \({this}\)")

    def slip_density_for_pressure(self, slip: dict, symbol: str) -> str:
        pressure = component_symbol("pressure", [slip["component"]], self.writer)
        return rf"the claim is the energy density \(\rho\), not the pressure \({pressure}\)"

    def solution_slip_tex(self, p: dict, symbol: str) -> str:
        """The diagnosis of an ansatz solution that differs: its slip, an earlier claim's constants it
        contradicts, and whether it solves the recorded equation."""
        solution = p["solution"]
        parts = [self.slip_tex(p["slip"], symbol)] if p.get("slip") else []
        if solution.get("contradicts"):
            parts = ["it is the recorded solution only for constants that contradict an earlier claim"
                     + self.fixed_tex(solution)]
        if solution.get("solves") is False:
            parts.append("it does not solve the equation it was solved from")
        return "; ".join(part for part in parts if part)

    # evidence: the zero test of the difference, typeset from its data
    @staticmethod
    def number_text(x: float) -> str:
        """A float in LaTeX with three significant digits (1.2 \\times 10^{-5})."""
        mantissa, _, exponent = f"{x:.3g}".partition("e")
        return mantissa + (rf" \times 10^{{{int(exponent)}}}" if exponent else "")

    def plain_test_tex(self, test: dict) -> str:
        """The arithmetic's own zero test of a difference (algebra.ZeroTest.as_data) in words."""
        how, holds = test.get("how"), test.get("vanishes")
        if how == "canonical form":
            return ("its canonical rational form is \\(0\\)" if holds
                    else "its canonical rational form has a non-zero numerator")
        if how == "cancel":
            return r"over a common denominator its terms cancel to \(0\)"
        if how == "simplify":
            return r"sympy's simplification reduces it to \(0\)"
        if how == "sampled":
            return (rf"it vanishes at {test['points']} random points to {test['digits']} digits, but sympy's "
                    r"simplification does not reduce it to \(0\): not proven symbolically")
        if how == "no point":
            return r"sympy's simplification does not reduce it to \(0\) and no sample point could be evaluated"
        if how == "point":
            return (rf"it is not zero at a random point, where its size is \({self.number_text(test['magnitude'])}\)"
                    if test.get("magnitude") is not None else "it is not zero at a random point")
        return ""

    def rewrite_tex(self, key: str) -> tuple[str, str]:
        """A rewrite of stepper's identity test (recorded by its key): what it does, and the identities it
        uses."""
        return {
            "as written": ("functions of compound arguments read as independent",
                           r"\(\sin^2 x + \cos^2 x = 1\), \(\cosh^2 x - \sinh^2 x = 1\)"),
            "reciprocal functions": (r"\(\tan\), \(\cot\), \(\sec\), \(\csc\) and their hyperbolic counterparts "
                                     r"through \(\sin\), \(\cos\), \(\sinh\) and \(\cosh\)",
                                     r"\(\tan x = \sin x/\cos x\), \(\cot x = \cos x/\sin x\), "
                                     r"\(\sec x = 1/\cos x\), \(\csc x = 1/\sin x\) and their hyperbolic counterparts"),
            "common angles": ("the angles as integer multiples of a common angle, expanded (half and double angles)",
                              r"\(\sin(a + b) = \sin a \cos b + \cos a \sin b\), "
                              r"\(\cos(a + b) = \cos a \cos b - \sin a \sin b\)"),
            "exponentials": (r"\(\sinh\), \(\cosh\) and \(\exp\) through powers of one exponential per base",
                             r"\(\sinh x = (e^x - e^{-x})/2\), \(\cosh x = (e^x + e^{-x})/2\), "
                             r"\(e^{a + b} = e^a e^b\)"),
            "logarithms": ("logarithms of products and powers split where the declared signs make the factors "
                           "positive",
                           r"\(\log(ab) = \log a + \log b\) and \(\log a^k = k \log a\) for \(a, b > 0\)"),
        }.get(key, (escape_text(key), escape_text(key)))

    def identity_test_tex(self, found: dict) -> str:
        """What stepper's identity rewrites found (identities.IdentityTest.as_data) in words."""
        signs = [self.function_sign_tex(FunctionSign.from_data(s)) for s in found.get("function_signs", [])]
        signs_tex = (" (free functions with their declared signs: " + ", ".join(rf"\({s}\)" for s in signs) + ")"
                     if signs else "")
        if found.get("vanishes"):
            rewrites = found.get("rewrites", [])
            if not rewrites:
                return rf"its canonical form is \(0\) with {self.rewrite_tex('as written')[0]}{signs_tex}"
            steps = ", then ".join(self.rewrite_tex(k)[0] for k in rewrites)
            decisive = self.rewrite_tex(found.get("decisive") or rewrites[-1])[1]
            return rf"its canonical form is \(0\) after rewriting {steps}{signs_tex}; decided by: {decisive}"
        if found.get("stopped"):
            return (f"stepper's identity rewrites stopped at a bound ({escape_text(found['stopped'])}) before "
                    r"reducing it to \(0\)")
        return ("stepper's identity rewrites (reciprocal functions, common angles, exponentials, logarithms) do "
                rf"not reduce it to \(0\){signs_tex}")

    def difference_test_tex(self, test: dict, found: dict) -> str:
        """How the difference was found zero, non-zero or undecided, from the zero tests' data."""
        if found.get("vanishes"):
            return "the difference: " + self.identity_test_tex(found)
        plain = self.plain_test_tex(test)
        if found and test.get("vanishes") is None:
            plain += "; " + self.identity_test_tex(found)
        return "the difference: " + plain if plain else ""

    def fixed_tex(self, solution: dict) -> str:
        """The integration constants earlier claims fixed: ' (with C_1 as in claim 2, C_2 = 3 from claim 1)'."""
        fixed = solution.get("fixed", [])
        if not fixed:
            return ""
        shown = []
        for name, value, number in fixed:
            if value == sympy.Symbol(name, real=True) or str(value) == name:
                shown.append(rf"\({self.sym(name)}\) as in claim {number}")
            else:
                shown.append(rf"\({self.sym(name)} = {self.writer.inline(value)}\) from claim {number}")
        return " (with " + ", ".join(shown) + ")"

    def solution_test_tex(self, p: dict) -> str:
        """The evidence of an ansatz-solution claim, from its data."""
        solution = p["solution"]
        if solution["case"] == "recorded":
            constants = p.get("constants", {})
            shown = ", ".join(rf"\({self.sym(name)} = {self.writer.inline(value)}\)" for name, value in constants.items())
            return ("the claim is the recorded general solution" + (f" with {shown}" if shown else "") + "; "
                    + self.difference_test_tex(p.get("test", {}), p.get("zero_test", {})))
        equation = solution.get("equation_test", {})
        how = self.identity_test_tex(equation["identities"]) if equation.get("identities", {}).get("vanishes") \
            else self.plain_test_tex(equation)
        if solution["case"] == "other branch":
            return ("the claimed function solves the equation it was solved from" + (f" ({how})" if how else "")
                    + ", but it is not the recorded general solution for any values of its constants"
                    + self.fixed_tex(solution) + ": another branch or a special solution")
        return ("no values of the integration constants make the recorded general solution equal to the claim"
                + self.fixed_tex(solution))

    def claim_test_tex(self, p: dict, plain: str) -> str:
        """A claim's evidence typeset from its data; ``plain`` (the audit's sentence, escaped) where the claim
        has none: a claim the derivation holds no value for."""
        if "problem" in p:
            return "the claimed value could not be read: " + escape_text(p["problem"])
        if "solution" in p:
            return self.solution_test_tex(p)
        if "test" in p:
            return self.difference_test_tex(p["test"], p.get("zero_test", {})) or plain
        return plain

    def audit(self) -> dict | None:
        """Each claim with its verdict, the values involved and a link to the step it was checked against.
        Everything shown is typeset from the claim step's data: the claim's symbol and words, the slip, the
        zero test; the claim's text, its syntax and its keys stay in the trace."""
        report = self.d.results.get("audit")
        if not report:
            return None
        w = self.writer
        rows = []
        plain = {row["number"]: breakable_text(row["evidence"]) for row in report["claims"]}
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
            symbol = self.claim_symbol(p["quantity"], p["component"], indices)
            if "solution" in p and p["outcome"] == "differs":
                diagnosis = self.solution_slip_tex(p, symbol)
            else:
                diagnosis = self.slip_tex(p["slip"], symbol) if p.get("slip") else ""
            rows.append({
                "anchor": self.anchor(step.id), "number": p["number"], "label": escape_text(p["label"]),
                # the claim as the trace names it (for tools and tests; the report shows symbol and words)
                "what": escape_text(p["quantity"].replace("_", " ") + (f" {p['component']}" if p["component"] else "")
                                    + (f", indices {indices}" if indices else "")),
                "words": self.claim_words(p["quantity"], p["component"], indices),
                "symbol": symbol,
                "outcome": escape_text(p["outcome"]), "agrees": p["outcome"] == "agrees",
                "diagnosis": diagnosis or (escape_text(p["diagnosis"]) if p["diagnosis"] else ""),
                "evidence": self.claim_test_tex(p, plain[p["number"]]),
                "claimed": tex("claimed"), "correct": tex("correct"), "difference": tex("difference"),
                "checked": self.link(step.uses[0]), "earliest": p["earliest_wrong"]})
        moved = [self.step_entry(s) for s in self.d.steps if s.stage == "audit" and s.kind != "claim"]
        return {"title": escape_text(report["title"]), "claims": rows, "steps": moved,
                "all_agree": report["all_agree"], "earliest": report["earliest_wrong"],
                "agreed": sum(1 for r in rows if r["agrees"])}

    def checks(self) -> list[dict]:
        out = []
        for step in self.d.steps:
            if isinstance(step.result, Verdict) and step.kind != "claim":  # claims are listed in the audit section
                word = _condition_word if step.kind == "energy condition" else _verdict_word
                out.append({"link": self.link(step.id), "statement": self.verdict_statement(step),
                            "word": word(step.result.holds), "holds": step.result.holds,
                            "evidence": self.verdict_evidence(step)})
        return out


#: The chain's stages in words, for the notice of a partial derivation.
STAGE_WORDS = {
    "metric_step": "the metric", "metric_derivatives": "the derivatives of the metric",
    "determinant": "the determinant", "inverse_metric": "the inverse metric",
    "christoffel": "the Christoffel symbols", "contracted_christoffel": "the contracted Christoffel symbols",
    "riemann": "the Riemann tensor", "ricci": "the Ricci tensor",
    "ricci_by_trace_identity": "the Ricci tensor's check by the trace identity", "scalar": "the scalar curvature",
    "einstein": "the Einstein tensor", "mixed_tensors": "the mixed Ricci and Einstein tensors",
    "verdict_ricci_flat": "the Ricci-flat verdict", "verdict_einstein_space": "the Einstein-space verdict",
    "riemann_lowered": "the Riemann tensor with all indices down",
    "verdict_constant_curvature": "the constant-curvature verdict", "kretschmann": "the Kretschmann scalar",
    "weyl": "the Weyl tensor", "bianchi": "the contracted Bianchi identity",
    "numeric_verification": "the numeric verification", "matter": "the matter content",
    "ansatz": "the ansatz", "geodesics": "the geodesic equations",
}


def stage_words(name: str) -> str:
    return STAGE_WORDS.get(name, "the stage " + name.replace("_", " "))


def partial_words(stopped) -> dict | None:
    """Why and where a partial derivation stopped and which stages it holds, in plain words (None for a
    whole derivation)."""
    if not stopped:
        return None
    finished = [stage_words(name) for name in stopped["finished"]]
    listed = (", ".join(finished[:-1]) + " and " + finished[-1]) if len(finished) > 1 else (finished or ["none"])[0]
    return {"why": "its time limit" if stopped["reason"] == "time limit" else "an interrupt (Ctrl-C)",
            "during": stage_words(stopped["during"]), "count": len(finished), "finished": listed}


def partial_notice(stopped) -> dict | None:
    """:func:`partial_words` escaped for LaTeX."""
    words = partial_words(stopped)
    return None if words is None else {k: escape_text(v) if isinstance(v, str) else v for k, v in words.items()}


def report_model(derivation: Derivation) -> dict[str, Any]:
    """Plain data for the report templates; the same for report.tex, report.pdf and appendix.tex, so made once
    per record (the record is immutable; the templates only read the model)."""
    cached = _last_model[0] if _last_model else None
    if cached is not None and cached[0]() is derivation:
        return cached[1]
    model = _make_report_model(derivation)
    _last_model[:] = [(weakref.ref(derivation), model)]
    return model


#: The last record's model and a weak reference to that record.
_last_model: list = []


def _make_report_model(derivation: Derivation) -> dict[str, Any]:
    model = _Model(derivation)
    steps = [s for s in derivation.steps if s.stage != "audit"]  # the audit's own steps go into its section
    entries = [model.step_entry(s) for s in steps]
    out = {
        "metric": model.metric_section(),
        "conventions": [{"name": k, "text": v} for k, v in derivation.conventions_latex.items()],
        "steps": entries,
        "sections": model.sections(entries, steps),
        "audit": model.audit(),
        "summary": model.summary(),
        "checks": model.checks(),
        "partial": partial_notice(derivation.stopped),
    }
    # a symbol of the metric's that the report also uses for a quantity of its own: the report's quantity
    # takes another symbol, and the conventions say so
    used = [tex for tex in model.clashes if any(_own_use(tex).search(text) for text in _strings(out))]
    renames = {own: new for own, _, new in OWN_SYMBOLS if own in used}
    if renames:
        out = _renamed(out, renames)
        out["conventions"].insert(0, {"name": "Symbols", "text": model.renaming_sentence(used)})
    return out
