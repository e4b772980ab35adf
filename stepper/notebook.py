"""The notebook exporter: a derivation written as a Jupyter notebook that
re-checks every recorded step with plain sympy.

For every step the notebook holds a markdown cell (the step id, its
annotation, the general and the instantiated formula, and an explanatory
sentence taken from a Jinja2 template) and a code cell that

1. binds the recorded result to Python variables, printed as Python source
   that re-creates the exact sympy expression,
2. recomputes the step from the values RECORDED by earlier cells -- the
   Christoffel symbols from the recorded inverse metric and metric
   derivatives, the Riemann tensor from the recorded Christoffel symbols, and
   so on, as if the recorded program were run again one step at a time, and
3. raises ``AssertionError`` naming the step if the two disagree.

The code cells import sympy only, never stepper, so a colleague can run the
notebook with nothing but sympy installed.  Running it top to bottom without
an error re-proves the derivation; a corrupted recorded value stops it in the
cell of the step that holds the value.

Nothing from the metric file reaches a code cell except the names of the
coordinates, parameters and free functions, which are validated identifiers;
the title, notes and line element appear in markdown only.  The same
derivation gives the same text, byte for byte: cell ids are numbered, the
metadata is fixed and nothing depends on time or hashing.

The explanatory text lives in ``templates/notebook/`` (Jinja2); pass your own
template directories to restyle it without touching this module.
"""

from __future__ import annotations

import ast
import builtins
import io
import keyword
import re
import tokenize
from pathlib import Path
from typing import Sequence

import jinja2
import nbformat
import sympy
from sympy.core.function import AppliedUndef
from sympy.printing.str import StrPrinter

from .record import as_expression
from .record import Derivation
from .quantities import QUANTITIES, in_position
from .runtime import MODULES as RUNTIME_MODULES, inlined_source
from .record import ASSUMPTION_WORDS, HOLDS_WORDS, MODEL_KINDS, Decision, Method, Step, Verdict
from .plots import ORBIT_DIGITS, ORBIT_END_TOLERANCE, orbit_plot, plots as derivation_plots

#: The project's own templates; user directories given to :func:`notebook_text` come first.
from .exporters import template_environment  # noqa: E402  (one environment for every template set)
from .latex import without_invisible  # noqa: E402
from .report import partial_words  # noqa: E402

KERNELSPEC = {"display_name": "Python 3", "language": "python", "name": "python3"}

_IDENTIFIER = re.compile(r"[A-Za-z][A-Za-z0-9_]*")
_STEP_ID = re.compile(r"[A-Za-z0-9_/,:]+")
_POSITIONS = re.compile(r"[ud]{1,8}")

def _runtime_names() -> frozenset[str]:
    """Every name the inlined runtime helpers define at top level (functions and tables)."""
    names = set()
    for module in RUNTIME_MODULES:
        for node in ast.parse(inlined_source(module)).body:
            if isinstance(node, ast.FunctionDef):
                names.add(node.name)
            elif isinstance(node, ast.Assign):
                names.update(n.id for target in node.targets for n in ast.walk(target) if isinstance(n, ast.Name))
    return frozenset(names)


#: Names the notebook defines itself (the runtime helpers' and those its cells assign); a metric symbol with
#: one of these names gets a different Python variable (its sympy name is unchanged).
_NOTEBOOK_NAMES = _runtime_names() | frozenset("""
    sp itertools mpmath np solve_ivp coordinates index_names coordinate dimension identity given recorded line_element
    recorded_holds residues claimed derived claim_agrees scalar_curvature einstein_constant sectional_curvature
    metric_determinant kretschmann_scalar christoffel_spot_check spot_check_deviation kappa cosmological_constant
    energy_density stress_energy_trace recorded_trace frame_broken_at recorded_vectors recorded_norms
    ansatz_constant ansatz_einstein ansatz_unknowns other_branches recorded_follows recorded_independent
    recorded_relations recorded_solution recorded_position integrate_orbit orbit_normalisation orbit_rates
    orbit_solution orbit_span orbit_start orbit_time orbit_time_rate orbit_tolerance orbit_values
    check_plot plot_data recorded_einstein_constant solved_ricci solved_scalar solved_kretschmann
    check_orbit_plot orbit_end
    recorded_tetrad products directions unnormalised expected
""".split())


#: The only sympy names a printed expression may contain: the elementary functions a metric file may
#: use (see stepper.parse), their sympy spellings, and what the printer writes for numbers and derivatives.
_PRINTABLE_SYMPY_NAMES = frozenset("""
    sin cos tan cot sec csc sinh cosh tanh coth exp log sqrt Abs pi E I sign DiracDelta Heaviside
    Derivative Rational Integer Function Symbol S
""".split())


class NotebookError(ValueError):
    """The derivation holds something the notebook cannot write safely."""


# --------------------------------------------------------------------------
# Expressions as Python source
# --------------------------------------------------------------------------

class _SourcePrinter(StrPrinter):
    """sympy's string printer, made exact for Python evaluation.

    Rationals print as ``Rational(p, q)`` (``1/2`` would become the float
    0.5), symbols and free functions print as the notebook's variable names,
    and anything without an exact Python form (floats) is refused.
    """

    def __init__(self, identifiers: dict[str, str], functions: dict[str, str],
                 others: dict[sympy.Symbol, str] | None = None):
        super().__init__({"order": "lex"})
        self._identifiers = identifiers
        self._functions = functions
        self._others = others or {}

    def _print_Symbol(self, expr):
        if expr in self._others:
            return self._others[expr]
        try:
            return self._identifiers[expr.name]
        except KeyError:
            raise NotebookError(f"symbol {expr.name!r} is neither a coordinate nor a declared parameter") from None

    _print_Dummy = _print_Symbol

    def _print_Function(self, expr):
        if isinstance(expr, AppliedUndef):
            name = expr.func.__name__
            if name not in self._functions:
                raise NotebookError(f"function {name!r} is not a declared free function")
            return f"{self._functions[name]}({self.stringify(expr.args, ', ')})"
        return super()._print_Function(expr)

    def _print_Mul(self, expr):
        # "2*(a + b)/c" would read back as (2*a + 2*b)/c: Python multiplies the
        # number into the sum first.  Printing "2*((a + b)/c)" keeps the tree.
        coefficient, rest = expr.as_coeff_Mul()
        if coefficient != 1 and coefficient.is_Rational and isinstance(rest, sympy.Mul) \
                and any(isinstance(factor, sympy.Add) for factor in rest.args):
            inner = self._print(rest)
            return f"-({inner})" if coefficient == -1 else f"{self._print(coefficient)}*({inner})"
        return super()._print_Mul(expr)

    def _print_Rational(self, expr):
        if expr.q == 1:
            return str(expr.p)
        if expr.p < 0:
            return f"-Rational({-expr.p}, {expr.q})"
        return f"Rational({expr.p}, {expr.q})"

    def _print_Half(self, expr):
        return self._print_Rational(expr)

    def _print_Float(self, expr):
        raise NotebookError(f"the floating-point number {expr} has no exact source form")


def _identifier_for(name: str, taken: set[str]) -> str:
    if not _IDENTIFIER.fullmatch(name) or keyword.iskeyword(name) or keyword.issoftkeyword(name):
        raise NotebookError(f"the name {name!r} is not a plain identifier; the notebook cannot use it")
    candidate = name
    while candidate in taken:
        candidate += "_"
    taken.add(candidate)
    return candidate


class _Source:
    """Prints expressions and literals for the code cells and remembers which
    sympy names the printed expressions need."""

    def __init__(self, derivation: Derivation):
        metric = derivation.metric
        reserved = (set(keyword.kwlist) | set(keyword.softkwlist) | set(dir(builtins)) | set(sympy.__all__)
                    | set(_NOTEBOOK_NAMES) | {"pi", "E", "I", "oo", "nan", "zoo", "S", "N", "O", "Q", "Rational"})
        taken = set(reserved)
        self.symbols: list[tuple[str, sympy.Symbol]] = []  # (variable, symbol)
        self.identifiers: dict[str, str] = {}
        for symbol in tuple(metric.coordinates) + tuple(metric.parameters):
            if symbol.name in self.identifiers:
                continue
            variable = _identifier_for(symbol.name, taken)
            self.identifiers[symbol.name] = variable
            self.symbols.append((variable, symbol))
        self.functions: dict[str, str] = {}
        for applied in metric.functions:
            name = applied.func.__name__
            if name not in self.functions:
                self.functions[name] = _identifier_for(name, taken)
        for step in derivation.steps:  # functions a matter model's solved form introduced (a mass function)
            if step.kind.value == "model" and step.quantity == "model_solution":
                for key in ("mass_function", "redshift_function", "scale_factor"):
                    value = step.params.get(key)
                    name = value.func.__name__ if isinstance(value, AppliedUndef) else None
                    if name is not None and name not in self.functions:
                        self.functions[name] = _identifier_for(name, taken)
        # Symbols the derivation introduced beyond the metric's own: integration constants, the velocity
        # components of the geodesic equations, a cosmological constant or G and c used only by [matter].
        known = set(metric.coordinates) | set(metric.parameters)
        self.others: list[tuple[str, sympy.Symbol]] = []
        self.other_variables: dict[sympy.Symbol, str] = {}
        for symbol in _introduced_symbols(derivation, known):
            variable = _identifier_for(symbol.name, taken)
            self.other_variables[symbol] = variable
            self.others.append((variable, symbol))
        self.coordinate_names = [c.name for c in metric.coordinates]
        self.words = dict(metric.assumptions)
        self._printer = _SourcePrinter(self.identifiers, self.functions, self.other_variables)
        self._own = set(self.identifiers.values()) | set(self.functions.values()) | set(self.other_variables.values())
        self.sympy_names: set[str] = set()

    def expr(self, value) -> str:
        if isinstance(value, bool) or not isinstance(value, (sympy.Basic, int)):
            raise NotebookError(f"expected a sympy expression, got {type(value).__name__}")
        text = self._printer.doprint(as_expression(value))
        for token in tokenize.generate_tokens(io.StringIO(text).readline):
            if token.type == tokenize.NAME and token.string not in self._own:
                if token.string not in _PRINTABLE_SYMPY_NAMES:
                    raise NotebookError(f"printed expression uses {token.string!r}, which the notebook does "
                                        "not write into code")
                self.sympy_names.add(token.string)
        return text

    def name(self, coordinate_name: str) -> str:
        """A coordinate name as a string literal (it is a validated identifier)."""
        if coordinate_name not in self.coordinate_names:
            raise NotebookError(f"{coordinate_name!r} is not a coordinate")
        return f'"{coordinate_name}"'

    def key(self, text_key: str) -> str:
        """A trace key such as "r,t,t" or "t:x,x" as a tuple of string literals."""
        parts = text_key.replace(":", ",").split(",")
        return "(" + ", ".join(self.name(p) for p in parts) + ("," if len(parts) == 1 else "") + ")"

    def names(self, text_key: str) -> str:
        """The indices of a key as call arguments: "r,t,t" -> '"r", "t", "t"'."""
        return ", ".join(self.name(p) for p in text_key.replace(":", ",").split(","))

    def table(self, components: dict) -> str:
        if not components:
            return "{}"
        lines = [f"    {self.key(k)}: {self.expr(v)}," for k, v in components.items()]
        return "{\n" + "\n".join(lines) + "\n}"

    def symbol_definition(self, variable: str, symbol: sympy.Symbol, declared: bool = True) -> str:
        word = self.words.get(symbol.name) if declared else None
        if word is None:
            word = next((w for w in ("positive", "negative", "nonnegative", "nonpositive", "nonzero", "real")
                         if getattr(symbol, f"is_{w}")), "complex")
        if word not in ASSUMPTION_WORDS:
            raise NotebookError(f"unknown assumption {word!r} for {symbol.name}")
        keywords = ASSUMPTION_WORDS[word]
        rebuilt = sympy.Symbol(symbol.name, **{k: True for k in keywords})
        if rebuilt != symbol:
            raise NotebookError(f"the symbol {symbol.name} has assumptions the notebook cannot re-create")
        arguments = "".join(f", {k}=True" for k in keywords)
        return f'{variable} = sp.Symbol("{symbol.name}"{arguments})'


def _introduced_symbols(derivation: Derivation, known: set) -> list[sympy.Symbol]:
    """Every symbol in a recorded result or parameter that is not a coordinate or parameter of the metric,
    in a fixed order (by name, then assumptions)."""
    found: set = set()

    def walk(value) -> None:
        if isinstance(value, Verdict) or isinstance(value, (str, bytes, bool)) or value is None:
            return
        if isinstance(value, dict):
            for inner in value.values():
                walk(inner)
        elif isinstance(value, (list, tuple)):
            for inner in value:
                walk(inner)
        elif isinstance(value, sympy.Basic):
            found.update(s for s in value.free_symbols if isinstance(s, sympy.Symbol) and s not in known)

    for step in derivation.steps:
        walk(step.result)
        walk(dict(step.params))
    walk(derivation.metric.line_element_expression)
    return sorted(found, key=lambda s: (s.name, sorted((k, str(v)) for k, v in s.assumptions0.items())))


_NUMBER = re.compile(r"-?[0-9]+(\.[0-9]+)?(e[-+]?[0-9]+)?")
_LABEL = re.compile(r"[A-Za-z0-9_ +\-*(),]+")
_ANSWER = HOLDS_WORDS


def _residue_label(residue: dict) -> str:
    """The notebook's key of a perfect-fluid residue: T_(a)(b) off the diagonal, or p_(a) - p_(b)."""
    a, b = residue["frame_indices"]
    return f"T_({a})({b})" if residue["kind"] == "off-diagonal" else f"p_({a}) - p_({b})"


def _label_literal(label: str) -> str:
    """A label stepper wrote (such as "rho + p_(r)") as a string literal."""
    if not _LABEL.fullmatch(label):
        raise NotebookError(f"label {label!r} has characters the notebook does not write into code")
    return f'"{label}"'


def _step_literal(step_id: str) -> str:
    if not _STEP_ID.fullmatch(step_id):
        raise NotebookError(f"step id {step_id!r} has characters the notebook does not write into code")
    return f'"{step_id}"'


# --------------------------------------------------------------------------
# The setup cell: helpers a referee reads once
# --------------------------------------------------------------------------

_HELPERS = inlined_source("core")

_MATTER_HELPERS = inlined_source("matter")


_ANSATZ_HELPERS = inlined_source("ansatz")


_GEODESIC_HELPERS = inlined_source("geodesics")

_PETROV_HELPERS = inlined_source("petrov")

_MODEL_HELPERS = inlined_source("models")


# --------------------------------------------------------------------------
# Step cells
# --------------------------------------------------------------------------

class _Cells:
    """Writes the code (and chooses the explanation topic) of one step's cells."""

    def __init__(self, derivation: Derivation, source: _Source):
        self.d = derivation
        self.s = source
        self.n = derivation.metric.dimension
        self.printers = self._printers()

    def for_step(self, step: Step) -> tuple[str, str]:
        """(topic, code) for ``step``, chosen by its kind, quantity and component (never by its id); the topic
        names the template macro that explains it."""
        printers = self.printers
        kind = step.kind.value
        method = (printers.get((kind, step.quantity, step.component)) or printers.get((kind, step.quantity, "*"))
                  or printers.get((kind, "*", "*")))
        if method is None:
            return "not_recomputed", self.not_recomputed(step)
        return method(step)

    def _printers(self) -> dict:
        """(kind, quantity, component) -> the method writing that step's cell; "*" stands for any component."""
        return {
            ("input", "metric", ""): self.metric,
            ("derivative", "metric_derivatives", ""): self.metric_derivatives,
            ("determinant", "determinant", ""): self.determinant,
            ("inverse", "inverse_metric", ""): self.inverse_metric,
            ("check", "inverse_metric", "identity"): self.inverse_check,
            ("component", "christoffel", "*"): self.christoffel_component,
            ("summary", "christoffel", ""): self.christoffel_summary,
            ("identity", "contracted_christoffel", "*"): self.contracted_component,
            ("check", "contracted_christoffel", ""): self.contracted_check,
            ("component", "riemann", "*"): self.riemann_component,
            ("summary", "riemann", ""): self.riemann_summary,
            ("component", "ricci", "*"): self.ricci_component,
            ("summary", "ricci", ""): self.ricci_summary,
            ("check", "ricci", "symmetry"): self.ricci_symmetry,
            ("route", "ricci_by_trace_identity", ""): self.ricci_route,
            ("check", "ricci", "agreement"): self.ricci_agreement,
            ("contraction", "scalar", ""): self.scalar,
            ("component", "einstein", "*"): self.einstein_component,
            ("summary", "einstein", ""): self.einstein_summary,
            ("raising", "ricci_mixed", ""): self.ricci_mixed,
            ("raising", "einstein_mixed", ""): self.einstein_mixed,
            ("lowering", "riemann_lowered", ""): self.riemann_lowered,
            ("check", "riemann_lowered", "pair_symmetry"): self.pair_symmetry,
            ("check", "riemann_lowered", "first_bianchi"): self.first_bianchi,
            ("numeric check", "", ""): self.numeric_verification,
            ("invariant", "kretschmann", ""): self.kretschmann,
            ("tensor", "weyl", ""): self.weyl,
            ("tensor", "cotton", ""): self.cotton,
            ("frame", "null_tetrad", ""): self.null_tetrad,
            ("check", "null_tetrad", "normalisation"): self.null_tetrad_check,
            ("frame components", "weyl_scalars", ""): self.weyl_scalars,
            ("verdict", "algebraic_type", ""): self.algebraic_type,
            ("verdict", "ricci_flat", ""): self.ricci_flat,
            ("verdict", "einstein_space", ""): self.einstein_space,
            ("verdict", "constant_curvature", ""): self.constant_curvature,
            ("verdict", "conformally_flat", ""): self.conformally_flat,
            ("verdict", "bianchi", ""): self.bianchi,
            ("field equations", "", ""): self.field_equations,
            ("component", "stress_energy", "*"): self.stress_energy_component,
            ("summary", "stress_energy", ""): self.stress_energy_summary,
            ("raising", "stress_energy_mixed", ""): self.stress_energy_mixed,
            ("raising", "stress_energy_up", ""): self.stress_energy_up,
            ("verdict", "trace_free", ""): self.trace_free,
            ("frame", "", ""): self.frame,
            ("frame", "", "given"): self.given_frame,
            ("check", "", "given frame"): self.given_frame_check,
            ("check", "", "null directions"): self.null_directions,
            ("check", "", "null dust"): self.null_dust,
            ("check", "", "frame"): self.frame_check,
            ("frame components", "frame_stress_energy", ""): self.frame_stress_energy,
            ("frame components", "frame_ricci", ""): self.frame_ricci,
            ("frame components", "frame_riemann", ""): self.frame_riemann,
            ("matter", "", ""): self.density_and_pressures,
            ("verdict", "perfect_fluid", ""): self.perfect_fluid,
            ("energy condition", "", "*"): self.energy_condition,
            ("ansatz", "field_equation", "equations"): self.ansatz_equations,
            ("ansatz", "field_equation", "dependence"): self.ansatz_dependence,
            ("ode solution", "", "*"): self.ansatz_solve,
            ("ansatz", "ansatz_solution", ""): self.ansatz_solution,
            ("check", "ansatz_solution", ""): self.ansatz_check,
            ("ansatz", "ansatz_solution", "properties"): self.ansatz_properties,
            ("geodesic", "", ""): self.geodesic_equations,
            ("claim", "*", "*"): self.claim,
            ("model", "model_stress_energy", ""): self.model_stress_energy,
            ("model", "model_equation", "equations"): self.model_equations,
            ("model", "model_conservation", ""): self.model_conservation,
            ("model", "model_solution", "*"): self.model_solved,
            # components an audit raised or lowered into the index position a claim names
            **{(kind, name, "*"): self.moved_component for name, q in QUANTITIES.items() if q.tensor == name
               for kind in ("raising", "lowering")},
        }

    # small pieces ---------------------------------------------------------
    def _id(self, step: Step) -> str:
        return _step_literal(step.id)

    def _indices(self, step: Step) -> str:
        return step.component

    def _done(self, step: Step) -> str:
        _step_literal(step.id)  # validates the id
        return f'print("{step.id}: agrees with its recomputation")'

    def _holds(self, step: Step) -> str:
        result = step.result
        if not isinstance(result, Verdict):
            raise NotebookError(f"step {step.id} should hold a verdict")
        return f"recorded_holds = {result.holds!r}"

    # input and first derivatives ------------------------------------------
    def metric(self, step):
        m = self.d.metric
        if m.line_element_expression is not None:
            return "metric_from_line_element", self._metric_from_line_element(step)
        rows = ",\n".join("    [" + ", ".join(self.s.expr(m.matrix[i, j]) for j in range(self.n)) + "]"
                          for i in range(self.n))
        code = f"""# The metric matrix as read from the input.
given = sp.Matrix([
{rows}
])
# The recorded components g_ij (those not listed are zero).
recorded = {self.s.table(step.result)}
check_table("metric", recorded, lambda i, j: given[index_names.index(i), index_names.index(j)], every_index(2))
metric.update(recorded)
{self._done(step)}"""
        return "metric", code

    def _metric_from_line_element(self, step) -> str:
        m = self.d.metric
        by_name = {symbol.name: symbol for _, symbol in self.s.others}
        differentials = []
        for name in self.s.coordinate_names:
            if f"d{name}" not in by_name:
                raise NotebookError(f"the line element has no differential d{name}")
            differentials.append(self.s.expr(by_name[f"d{name}"]))
        return f"""# The line element as stepper read it, written out as sympy code (abbreviations expanded), with
# the differentials dx^i as symbols.  Expanding it gives g_ii as the coefficient of (dx^i)^2 and
# g_ij = g_ji as half the coefficient of dx^i dx^j: computed here, independently of the recorded matrix.
line_element = {self.s.expr(m.line_element_expression)}
given = metric_from_line_element(line_element, [{", ".join(differentials)}])
# The recorded components g_ij (those not listed are zero).
recorded = {self.s.table(step.result)}
check_table("metric", recorded, lambda i, j: given[index_names.index(i), index_names.index(j)], every_index(2))
metric.update(recorded)
{self._done(step)}"""

    def metric_derivatives(self, step):
        code = f"""# The recorded derivatives d_k g_ij, keyed (k, i, j) with i <= j (those not listed are zero).
recorded = {self.s.table(step.result)}
check_table("metric_derivatives", recorded, lambda k, i, j: sp.diff(component(metric, i, j), coordinate[k]),
            [(k,) + pair for k in index_names for pair in index_pairs()])
metric_derivatives.update(recorded)
metric_derivatives.update({{(k, j, i): value for (k, i, j), value in recorded.items()}})  # d_k g_ji = d_k g_ij
{self._done(step)}"""
        return "metric_derivatives", code

    def determinant(self, step):
        code = f"""recorded = {self.s.expr(step.result)}
check("determinant", recorded, metric_matrix().det(method="berkowitz"))
metric_determinant = recorded
{self._done(step)}"""
        return "determinant", code

    def inverse_metric(self, step):
        code = f"""# The recorded inverse metric g^ij (components not listed are zero).
recorded = {self.s.table(step.result)}
# With the recorded g^ij and g_ij, g^ik g_kj must be the identity matrix.
identity = {{(i, i): 1 for i in index_names}}
check_table("inverse_metric", identity,
            lambda i, j: sum((component(recorded, i, k) * component(metric, k, j) for k in index_names), sp.S.Zero),
            every_index(2))
inverse_metric.update(recorded)
{self._done(step)}"""
        return "inverse_metric", code

    def inverse_check(self, step):
        code = f"""{self._holds(step)}
residues = {{
    f"g^ik g_kj - delta at {{i}},{{j}}": sum((component(inverse_metric, i, k) * component(metric, k, j)
                                            for k in index_names), sp.S.Zero) - (1 if i == j else 0)
    for i, j in every_index(2)
}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "inverse_metric_check", code

    # Christoffel symbols -----------------------------------------------------
    def christoffel_component(self, step):
        key = self._indices(step)
        a, b, c = (self.s.name(p) for p in key.split(","))
        store = f"christoffel[{a}, {b}, {c}] = recorded"
        if b != c:
            store = f"christoffel[{a}, {b}, {c}] = christoffel[{a}, {c}, {b}] = recorded"
        code = f"""recorded = {self.s.expr(step.result)}
check({self._id(step)}, recorded, christoffel_from_metric({a}, {b}, {c}))
{store}
{self._done(step)}"""
        return "christoffel_component", code

    def christoffel_summary(self, step):
        code = f"""# Every non-zero Gamma^a_bc, both orders of b, c (those not listed are zero).
recorded = {self.s.table(step.result)}
check_summary("christoffel", recorded, christoffel, christoffel_from_metric,
              [(a,) + pair for a in index_names for pair in index_pairs()])
{self._done(step)}"""
        return "christoffel_summary", code

    def contracted_component(self, step):
        x = self.s.name(self._indices(step))
        result = step.result
        code = f"""recorded = {{"sum": {self.s.expr(result["sum"])}, "from_determinant": {self.s.expr(result["from_determinant"])}}}
check({self._id(step)}, recorded["sum"], sum((component(christoffel, l, l, {x}) for l in index_names), sp.S.Zero),
      part="sum")
check({self._id(step)}, recorded["from_determinant"],
      sp.diff(metric_determinant, coordinate[{x}]) / (2 * metric_determinant), part="from_determinant")
christoffel_trace[{x}] = recorded["sum"]
log_sqrt_det[{x}] = recorded["from_determinant"]
{self._done(step)}"""
        return "contracted_christoffel_component", code

    def contracted_check(self, step):
        code = f"""{self._holds(step)}
residues = {{f"along {{i}}": christoffel_trace[i] - log_sqrt_det[i] for i in index_names}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "contracted_christoffel_check", code

    # Riemann and Ricci -----------------------------------------------------
    def riemann_component(self, step):
        key = self._indices(step)
        a, b, c, d = (self.s.name(p) for p in key.split(","))
        groups = ""
        if step.params.get("groups"):
            lines = ["# The terms grouped by the Christoffel symbols they come from, each group as recorded:"]
            total = []
            for group in step.params["groups"]:
                sign = "-" if group["sign"] < 0 else "+"
                if group["kind"] == "derivative":
                    indices = ", ".join(self.s.name(p) for p in [group["by"]] + group["christoffel"].split(","))
                    call = f"riemann_group(derivative=({indices}))"
                else:
                    pairs = ", ".join("((" + ", ".join(self.s.name(p) for p in first.split(",")) + "), ("
                                      + ", ".join(self.s.name(p) for p in second.split(",")) + "))"
                                      for first, second in group["pairs"])
                    call = f"riemann_group(products=[{pairs}])"
                lines.append(f"check({self._id(step)}, {self.s.expr(group['value'])}, {call}, \"a group of its terms\")")
                total.append(f"{sign} {self.s.expr(group['value'])}")
            lines.append(f"check({self._id(step)}, recorded, {' '.join(total)}, \"the sum of its groups\")")
            groups = "\n".join(lines) + "\n"
        code = f"""recorded = {self.s.expr(step.result)}
check({self._id(step)}, recorded, riemann_from_christoffel({a}, {b}, {c}, {d}))
{groups}riemann[{a}, {b}, {c}, {d}] = recorded
riemann[{a}, {b}, {d}, {c}] = -recorded
{self._done(step)}"""
        return "riemann_component", code

    def riemann_summary(self, step):
        code = f"""# Every non-zero R^a_bcd, both orders of c, d (those not listed are zero).
recorded = {self.s.table(step.result)}
check_summary("riemann", recorded, riemann, riemann_from_christoffel,
              [(a, b) + pair for a in index_names for b in index_names for pair in index_pairs(strict=True)])
{self._done(step)}"""
        return "riemann_summary", code

    def _symmetric_component(self, step, table: str, recompute: str, topic: str):
        """A two-index symmetric component: check it, then store it under both index orders."""
        i, j = (self.s.name(p) for p in self._indices(step).split(","))
        store = f"{table}[{i}, {j}] = recorded" if i == j else f"{table}[{i}, {j}] = {table}[{j}, {i}] = recorded"
        code = f"""recorded = {self.s.expr(step.result)}
check({self._id(step)}, recorded, {recompute}({i}, {j}))
{store}
{self._done(step)}"""
        return topic, code

    def ricci_component(self, step):
        return self._symmetric_component(step, "ricci", "ricci_from_riemann", "ricci_component")

    def _symmetric_summary(self, step, table: str, symbol: str, recompute: str):
        """Summary of a symmetric two-index tensor: listed entries match, the rest recompute to zero."""
        code = f"""# Every non-zero {symbol}_ij, both orders (those not listed are zero).
recorded = {self.s.table(step.result)}
check_summary("{table}", recorded, {table}, {recompute}, index_pairs())
{self._done(step)}"""
        return f"{table}_summary", code

    def ricci_summary(self, step):
        return self._symmetric_summary(step, "ricci", "R", "ricci_from_riemann")

    def ricci_symmetry(self, step):
        code = f"""{self._holds(step)}
residues = {{f"R_{{i}},{{j}} - R_{{j}},{{i}}": ricci_from_riemann(i, j) - ricci_from_riemann(j, i)
            for i, j in index_pairs(strict=True)}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "ricci_symmetry", code

    def ricci_route(self, step):
        code = f"""# R_ij for i <= j by the trace identity (those not listed are zero).
recorded = {self.s.table(step.result)}
check_table("ricci_by_trace_identity", recorded, ricci_from_trace_identity, index_pairs())
ricci_second_route.update(recorded)
{self._done(step)}"""
        return "ricci_by_trace_identity", code

    def ricci_agreement(self, step):
        code = f"""{self._holds(step)}
residues = {{f"R_{{i}},{{j}}": component(ricci, i, j) - component(ricci_second_route, i, j)
            for i, j in index_pairs()}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "ricci_agreement", code

    def scalar(self, step):
        code = f"""recorded = {self.s.expr(step.result)}
check("scalar", recorded, scalar_from_ricci())
scalar_curvature = recorded
{self._done(step)}"""
        return "scalar", code

    def einstein_component(self, step):
        return self._symmetric_component(step, "einstein", "einstein_from_ricci", "einstein_component")

    def einstein_summary(self, step):
        return self._symmetric_summary(step, "einstein", "G", "einstein_from_ricci")

    # lowered Riemann, invariants, Weyl ------------------------------------
    def riemann_lowered(self, step):
        code = f"""# R_abcd for a < b, c < d, (a, b) <= (c, d) (those not listed are zero).
recorded = {self.s.table(step.result)}
check_table("riemann_lowered", recorded, lowered_from_riemann, riemann_index_sets())
fill_lowered(riemann_lowered, recorded)
{self._done(step)}"""
        return "riemann_lowered", code

    def pair_symmetry(self, step):
        code = f"""{self._holds(step)}
# R_cdab = g_ce R^e_dab, from the recorded R^e_dab, against the recorded R_abcd.
residues = {{
    f"R_{{a}},{{b}},{{c}},{{d}} - R_{{c}},{{d}},{{a}},{{b}}":
        sum((component(metric, c, e) * component(riemann, e, d, a, b) for e in index_names), sp.S.Zero)
        - component(riemann_lowered, a, b, c, d)
    for a, b, c, d in riemann_index_sets()
}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "riemann_lowered_pair_symmetry", code

    def _positions(self, positions: str) -> str:
        """Index positions ("ud") as a string literal."""
        if not isinstance(positions, str) or not _POSITIONS.fullmatch(positions):
            raise NotebookError(f"index positions {positions!r} are not letters u and d")
        return f'"{positions}"'

    def moved_component(self, step):
        p = step.params
        source = p.get("source")
        if source not in QUANTITIES or QUANTITIES[source].tensor != step.quantity:
            raise NotebookError(f"step {step.id}: {source!r} is not a position of the {step.quantity} tensor")
        # the Weyl cell checked only the independent C_abcd; its helper gives every ordering
        accessor = "weyl_from_lowered" if source == "weyl" else f"lambda *i: component({source}, *i)"
        names = self.s.names(step.component)
        positions = self._positions(p["positions"])
        code = f"""# One component in the index positions a claim names, from the recorded {source} and the recorded metric.
recorded = {self.s.expr(step.result)}
check({self._id(step)}, recorded,
      moved_component({accessor}, {self._positions(p["source_positions"])}, {positions}, ({names},)))
moved_components["{step.quantity}", {positions}, {names}] = recorded
{self._done(step)}"""
        return "moved_component", code

    def claim(self, step):
        p = step.params
        number = int(p["number"])
        quantity = p["quantity"]
        outcome = p["outcome"]
        if "claimed" not in p:
            code = (f"# Claim {number} could not be read (see the text above); there is nothing to check.\n"
                    f'print("claim {number}: unreadable, not checked")')
            return "claim", code
        derived = self._derived_for_claim(number, quantity, p)
        if derived is None:
            code = (f"# Claim {number} is about a quantity this derivation did not compute; nothing to check.\n"
                    f'print("claim {number}: {outcome}, not checked here")')
            return "claim", code
        expected = {"agrees": "True", "differs": "False"}.get(outcome)
        check = (f"""if claim_agrees != {expected}:
    raise AssertionError("claim {number}: the recorded verdict was '{outcome}', the recomputation disagrees")
print(f"claim {number}: {outcome}, as recorded")""" if expected else
                 f'print(f"claim {number}: recorded as {outcome}; exact recomputation gives {{claim_agrees}}")')
        code = f"""# Claim {number}, as read by stepper, against the value derived above.
claimed = {self.s.expr(p["claimed"])}
derived = {derived}
claim_agrees = vanishes(claimed - derived)
{check}"""
        return "claim", code

    def _derived_for_claim(self, number: int, quantity: str, p: dict) -> str | None:
        """Python source for the notebook's own value of a claimed quantity; None when this derivation
        did not compute it."""
        results = self.d.results
        scalars = {"determinant": "metric_determinant", "scalar": "scalar_curvature",
                   "kretschmann": "kretschmann_scalar"}
        q = QUANTITIES.get(quantity)
        if q is None or not q.claimable:
            raise NotebookError(f"claim {number}: unknown quantity {quantity!r}")
        component = p.get("component", "")
        indices = p.get("indices", "")
        if indices and indices != q.positions:  # a claim in another index position
            member = in_position(quantity, indices)
            if member is None:
                moved = [s for s in self.d.steps if s.stage == "audit" and s.kind in ("raising", "lowering")
                         and s.quantity == q.tensor and s.component == component
                         and s.params.get("positions") == indices]
                if not moved:
                    return None
                return f'moved_components["{q.tensor}", {self._positions(indices)}, {self.s.names(component)}]'
            quantity, q = member.name, member
        if quantity in scalars:
            return scalars[quantity] if quantity in results else None
        if quantity == "weyl":
            return f"weyl_from_lowered({self.s.names(component)})" if "weyl" in results else None
        if q.rank >= 2 and set(q.positions) <= set("udf"):  # a table the cells above fill under its own name
            return f"component({quantity}, {self.s.names(component)})" if quantity in results else None
        if quantity == "energy_density":
            return "energy_density" if "energy_density" in results else None
        if quantity == "pressure":
            return f"pressures[{self.s.name(component)}]" if component in results.get("pressures", {}) else None
        if quantity == "geodesic_acceleration":
            return (f"geodesic_acceleration[{self.s.name(component)}]"
                    if "geodesic_equations" in results else None)
        if quantity == "ansatz_solution":
            return self._derived_ansatz_solution(number, component, p)
        if quantity == "model_conservation":
            return f"model_divergence({self.s.name(component)})" if quantity in results else None
        raise NotebookError(f"claim {number}: unknown quantity {quantity!r}")

    def _derived_ansatz_solution(self, number: int, function_name: str, p: dict) -> str | None:
        """The recorded general solution for one unknown with the integration constants the audit fitted."""
        request = self.d.metric.ansatz
        unknown = next((u for u in (request.unknowns if request is not None else ())
                        if u.func.__name__ == function_name), None)
        solution = self.d.results.get("ansatz", {}).get("solution", {})
        if unknown is None or str(unknown) not in solution:
            return None
        constants = {s.name: s for _, s in self.s.others}
        values = []
        for name, value in p.get("constants", {}).items():
            if name not in constants:
                raise NotebookError(f"claim {number}: unknown integration constant {name!r}")
            values.append(f"{self.s.expr(constants[name])}: {self.s.expr(value)}")
        derived = f"ansatz_solution[{self.s.expr(unknown)}]"
        return f"{derived}.subs({{{', '.join(values)}}})" if values else derived

    def first_bianchi(self, step):
        code = f"""{self._holds(step)}
# The cyclic sum R_abcd + R_acdb + R_adbc over the recorded lowered components.
residues = {{
    f"R_{{a}},{{b}},{{c}},{{d}} + R_{{a}},{{c}},{{d}},{{b}} + R_{{a}},{{d}},{{b}},{{c}}":
        component(riemann_lowered, a, b, c, d) + component(riemann_lowered, a, c, d, b)
        + component(riemann_lowered, a, d, b, c)
    for a in index_names for b, c, d in itertools.combinations(index_names, 3)
}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "riemann_lowered_first_bianchi", code

    def numeric_verification(self, step):
        params = step.params
        symbols = {p.name: p for p in self.d.metric.parameters}
        numbers = "{" + ", ".join(f"{self.s.expr(symbols[name])}: {self.s.expr(value)}"
                                  for name, value in params["parameters"].items()) + "}"
        functions = {f.func.__name__: f for f in self.d.metric.functions}
        bodies = "{" + ", ".join(f"{self.s.expr(functions[name])}: {self.s.expr(body)}"
                                 for name, body in params["functions"].items()) + "}"
        for point in params["points"]:
            for k, v in point.items():
                if not (_NUMBER.fullmatch(v) and k in self.s.coordinate_names):
                    raise NotebookError(f"numeric_verification point {k}={v!r} is not a plain number")
        points = "[" + ", ".join("{" + ", ".join(f'"{k}": "{v}"' for k, v in point.items()) + "}"
                                 for point in params["points"]) + "]"
        code = f"""{self._holds(step)}
# A numeric spot check of the Christoffel symbols, independent of the algebra above: at the recorded
# random points, with the recorded parameter values and free functions, differentiate the metric by
# central differences in mpmath and compare with the recorded symbolic Christoffel symbols.
import mpmath


def christoffel_spot_check():
    # The largest relative deviation of the recorded Christoffel symbols from finite differences.
    mpmath.mp.dps = 40
    _numeric_parameters = {numbers}
    _numeric_functions = {bodies}
    _concrete_metric = metric_matrix().subs(_numeric_functions).doit().subs(_numeric_parameters)
    _metric_at = sp.lambdify([coordinates], _concrete_metric, "mpmath")
    _step_size = mpmath.mpf(10) ** -15
    _worst = mpmath.mpf(0)
    for _point in {points}:
        _here = [mpmath.mpf(_point[_name]) for _name in index_names]
        _g_inverse = mpmath.matrix(_metric_at(_here)) ** -1
        _derivative = []
        for _direction in range(dimension):
            _up, _down = list(_here), list(_here)
            _up[_direction] += _step_size
            _down[_direction] -= _step_size
            _derivative.append((mpmath.matrix(_metric_at(_up)) - mpmath.matrix(_metric_at(_down))) / (2 * _step_size))
        _values = {{coordinate[_name]: sp.Rational(_point[_name]) for _name in index_names}}
        for _upper, _lower_1, _lower_2 in every_index(3):
            _i, _j, _k = (index_names.index(_name) for _name in (_upper, _lower_1, _lower_2))
            _numeric_value = sum(_g_inverse[_i, _m] * (_derivative[_j][_m, _k] + _derivative[_k][_m, _j] - _derivative[_m][_j, _k])
                                for _m in range(dimension)) / 2
            _symbolic_value = component(christoffel, _upper, _lower_1, _lower_2)
            _symbolic_value = _symbolic_value.subs(_numeric_functions).doit().subs(_numeric_parameters)
            _symbolic_value = mpmath.mpf(sp.N(_symbolic_value.subs(_values), 40))
            _scale = max(abs(_symbolic_value), abs(_numeric_value), mpmath.mpf(10) ** -10)
            _worst = max(_worst, abs(_symbolic_value - _numeric_value) / _scale)
    return _worst


spot_check_deviation = christoffel_spot_check()
print(f"numeric_verification: largest relative deviation of the Christoffel symbols "
      f"{{mpmath.nstr(spot_check_deviation, 3)}}")
if recorded_holds and spot_check_deviation > mpmath.mpf(10) ** -15:
    raise AssertionError("step numeric_verification: the Christoffel symbols disagree with finite differences")"""
        return "numeric_verification", code

    def kretschmann(self, step):
        code = f"""recorded = {self.s.expr(step.result)}
check("kretschmann", recorded, kretschmann_from_lowered())
kretschmann_scalar = recorded
{self._done(step)}"""
        return "kretschmann", code

    def weyl(self, step):
        code = f"""# C_abcd for a < b, c < d, (a, b) <= (c, d) (those not listed are zero).
recorded = {self.s.table(step.result)}
check_table("weyl", recorded, weyl_from_lowered, riemann_index_sets())
weyl.update(recorded)
{self._done(step)}"""
        return "weyl", code

    def cotton(self, step):
        code = f"""# C_abc for b < c (those not listed are zero; C_acb = -C_abc).
recorded = {self.s.table(step.result)}
check_table("cotton", recorded, cotton_from_ricci, cotton_index_sets())
fill_cotton(cotton, recorded)
{self._done(step)}"""
        return "cotton", code

    # the Weyl scalars and the algebraic type (stepper.petrov) ---------------------
    def _literal(self, value) -> str:
        """Plain data of a step's params as Python source: expressions printed, text quoted (the texts are
        stepper's own words and coordinate names), numbers and booleans as they are."""
        if isinstance(value, dict):
            return "{" + ", ".join(f"{self._literal(k)}: {self._literal(v)}" for k, v in value.items()) + "}"
        if isinstance(value, (list, tuple)):
            return "[" + ", ".join(self._literal(v) for v in value) + "]"
        if isinstance(value, str):
            if not all(ch.isalnum() or ch in " _^-" for ch in value):
                raise NotebookError(f"the text {value!r} has characters the notebook does not write into code")
            return f'"{value}"'
        if value is None or isinstance(value, (bool, float)):
            return repr(value)
        return self.s.expr(value)

    def null_tetrad(self, step):
        p, lit = step.params, self._literal
        code = f"""# The recorded Gram-Schmidt order, unnormalised vectors w_k, squared norms N_k and their signs, the roots
# sqrt|N_k|, the products of |N_k| that are perfect squares, and the tetrad vectors (components not listed are zero).
tetrad_roots = {lit(p["roots"])}
recorded_vectors = {lit(step.result)}
check_null_tetrad({self._id(step)}, {lit(p["order"])}, {lit(p["vectors_unnormalised"])},
                  {lit(p["squared_norms"])}, {lit(p["signs"])}, tetrad_roots,
                  {lit([[q["directions"], q["value"]] for q in p["perfect_squares"]])}, recorded_vectors,
                  {lit(p["pairs"])}, {lit(p["sign_point"])})
{self._done(step)}"""
        return "null_tetrad", code

    def null_tetrad_check(self, step):
        code = f"""{self._holds(step)}
# g(w_a, w_b) - delta_ab N_a for the unnormalised vectors rebuilt above: with e_k = w_k / sqrt|N_k| this makes
# l.n = -1, m.mbar = 1 and every other product of tetrad vectors 0.
residues = {{f"g(w_{{a}}, w_{{b}}) - delta N": metric_inner(tetrad_unnormalised[a], tetrad_unnormalised[b])
            - (tetrad_norms[a] if a == b else 0)
            for position, a in enumerate(tetrad_order) for b in tetrad_order[position:]}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "null_tetrad_check", code

    def weyl_scalars(self, step):
        lit = self._literal
        if "tetrad" in step.params:  # the metric file's tetrad
            code = f"""# The Weyl scalars for the tetrad of the metric file, contracted here with the recorded Weyl tensor.
recorded_vectors = {lit(step.params["tetrad"])}
recorded = {lit(step.result)}
weyl_scalar_values = check_weyl_scalars_given({self._id(step)}, recorded, recorded_vectors)
{self._done(step)}"""
            return "weyl_scalars", code
        code = f"""# Each Psi as a sum of parts: coefficient * (i if imaginary) * the product of the listed roots sqrt|N_k|.
recorded_parts = {lit(step.params["parts"])}
recorded = {lit(step.result)}
weyl_scalar_values = check_weyl_scalars({self._id(step)}, recorded_parts, recorded, tetrad_roots)
{self._done(step)}"""
        return "weyl_scalars", code

    def algebraic_type(self, step):
        p, lit = step.params, self._literal
        given = any(s.quantity == "weyl_scalars" and "tetrad" in s.params for s in self.d.steps)
        if given:
            code = f"""recorded_type = {lit(p["type"])}
recorded_invariants = {lit(p["invariants"])}
decisions = {lit(p["decisions"])}
check_algebraic_type_given({self._id(step)}, recorded_type, recorded_invariants, decisions, weyl_scalar_values)"""
            return "algebraic_type", code
        code = f"""recorded_type = {lit(p["type"])}
recorded_invariants = {lit(p["invariant_parts"])}
decisions = {lit(p["decisions"])}
check_algebraic_type({self._id(step)}, recorded_type, recorded_invariants, decisions, weyl_scalar_values)"""
        return "algebraic_type", code

    # verdicts -------------------------------------------------------------
    def ricci_flat(self, step):
        code = f"""{self._holds(step)}
residues = {{f"R_{{i}},{{j}}": component(ricci, i, j) for i, j in index_pairs()}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "verdict_ricci_flat", code

    def einstein_space(self, step):
        code = f"""{self._holds(step)}
einstein_constant = scalar_curvature / dimension  # lambda = R/n
residues = {{f"R_{{i}},{{j}} - lambda g_{{i}},{{j}}": component(ricci, i, j) - einstein_constant * component(metric, i, j)
            for i, j in index_pairs()}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "verdict_einstein_space", code

    def constant_curvature(self, step):
        code = f"""{self._holds(step)}
sectional_curvature = scalar_curvature / (dimension * (dimension - 1))  # k = R/(n(n-1))
residues = {{
    f"R_{{a}},{{b}},{{c}},{{d}} - k(...)": component(riemann_lowered, a, b, c, d) - sectional_curvature * (
        component(metric, a, c) * component(metric, b, d) - component(metric, a, d) * component(metric, b, c))
    for a, b, c, d in riemann_index_sets()
}}
residues.update({{f"d_{{x}} k": sp.diff(sectional_curvature, coordinate[x]) for x in index_names}})
verdict({self._id(step)}, recorded_holds, residues)"""
        return "verdict_constant_curvature", code

    def conformally_flat(self, step):
        if self.n == 2:
            code = f"""{self._holds(step)}
# In two dimensions every metric is conformally flat (isothermal coordinates exist): nothing to compute.
if recorded_holds is not True:
    raise AssertionError("step verdict/conformally_flat: a two-dimensional metric is always conformally flat")
print("verdict/conformally_flat: holds in two dimensions, as recorded")"""
            return "verdict_conformally_flat_two_dimensions", code
        if self.n == 3:
            code = f"""{self._holds(step)}
# In three dimensions the Weyl tensor vanishes identically; the Cotton tensor decides conformal flatness.
residues = {{f"Cotton_{{a}},{{b}},{{c}}": component(cotton, a, b, c) for a, b, c in cotton_index_sets()}}
verdict({self._id(step)}, recorded_holds, residues)"""
            return "verdict_conformally_flat_three_dimensions", code
        code = f"""{self._holds(step)}
residues = {{f"C_{{a}},{{b}},{{c}},{{d}}": component(weyl, a, b, c, d) for a, b, c, d in riemann_index_sets()}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "verdict_conformally_flat", code

    def bianchi(self, step):
        code = f"""{self._holds(step)}
residues = {{f"nabla^a G_a{{b}}": divergence_of_einstein(b) for b in index_names}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "verdict_bianchi", code

    # matter -------------------------------------------------------------------
    def field_equations(self, step):
        result = step.result
        request = self.d.metric.matter
        units = step.params.get("units", "geometric")
        if units == "physical":
            if request is None or request.newton is None or request.light is None:
                raise NotebookError("field_equations: physical units without the symbols G and c")
            expected = f"8*sp.pi*{self.s.expr(request.newton)}/{self.s.expr(request.light)}**4"
            why = "kappa = 8 pi G / c^4 in physical units"
        else:
            expected = "8*sp.pi"
            why = "kappa = 8 pi G / c^4 = 8 pi in geometric units G = c = 1"
        lam = request.cosmological_constant if request is not None else result["cosmological_constant"]
        code = f"""recorded = {{"kappa": {self.s.expr(result["kappa"])}, "cosmological_constant": {self.s.expr(result["cosmological_constant"])}}}
check("field_equations", recorded["kappa"], {expected}, part="kappa")  # {why}
check("field_equations", recorded["cosmological_constant"], {self.s.expr(lam)}, part="Lambda as requested")
kappa = recorded["kappa"]
cosmological_constant = recorded["cosmological_constant"]
{self._done(step)}"""
        return "field_equations", code

    def stress_energy_component(self, step):
        return self._symmetric_component(step, "stress_energy", "stress_energy_from_einstein", "stress_energy_component")

    def stress_energy_summary(self, step):
        return self._symmetric_summary(step, "stress_energy", "T", "stress_energy_from_einstein")

    def _raised(self, step, table: str, recompute: str, what: str):
        code = f"""# {what}, keyed (i, j) (those not listed are zero).
recorded = {self.s.table(step.result)}
check_table("{table}", recorded, {recompute}, every_index(2))
{table}.update(recorded)
{self._done(step)}"""
        return table, code

    def stress_energy_mixed(self, step):
        return self._raised(step, "stress_energy_mixed", "mixed_stress_energy_from_lowered", "T^i_j = g^ik T_kj")

    def ricci_mixed(self, step):
        return self._raised(step, "ricci_mixed", "lambda a, b: mixed_from_lowered(ricci, a, b)", "R^a_b = g^ac R_cb")

    def einstein_mixed(self, step):
        return self._raised(step, "einstein_mixed", "lambda a, b: mixed_from_lowered(einstein, a, b)",
                            "G^a_b = g^ac G_cb")

    def stress_energy_up(self, step):
        return self._raised(step, "stress_energy_up", "raised_stress_energy_from_lowered", "T^ij = g^ik g^jl T_kl")

    def trace_free(self, step):
        code = f"""{self._holds(step)}
recorded_trace = {self.s.expr(step.params["trace"])}
# The trace from the recorded mixed components, and again as g^ij T_ij from the recorded T_ij.
stress_energy_trace = sum((component(stress_energy_mixed, i, i) for i in index_names), sp.S.Zero)
check({self._id(step)}, recorded_trace, stress_energy_trace, part="T^i_i")
check({self._id(step)}, recorded_trace, sum((component(inverse_metric, i, j) * component(stress_energy, i, j)
                                            for i, j in every_index(2)), sp.S.Zero), part="g^ij T_ij")
verdict({self._id(step)}, recorded_holds, {{"T^i_i": stress_energy_trace}})"""
        return "verdict_trace_free", code

    def _frame_region(self) -> str:
        request = self.d.metric.matter
        known = {s for _, s in self.s.symbols} | set(self.s.other_variables)
        entries = [f"{self.s.expr(symbol)}: ({self.s.expr(low)}, {self.s.expr(high)})"
                   for symbol, low, high in (request.region if request is not None else ()) if symbol in known]
        return "{" + ", ".join(entries) + "}"

    def frame(self, step):
        if isinstance(step.result, Verdict):
            request = self.d.metric.matter
            time_name = self.s.name(request.time.name if request is not None else self.s.coordinate_names[0])
            code = f"""{self._holds(step)}
# stepper found that no orthonormal frame can be built; the construction must break down here too.
frame_broken_at = gram_schmidt_frame({time_name})[2]
if (frame_broken_at is None) != (recorded_holds is not False):
    raise AssertionError("step frame: recorded that no frame exists, but the construction here disagrees")
print(f"frame: the construction breaks down at the vector {{frame_broken_at}}, as recorded")"""
            return "frame_missing", code
        if step.params.get("given"):
            return self.given_orthonormal_frame(step)
        time, order = step.params["time"], step.params["order"]
        vectors = step.result["vectors"]
        norms = step.result["squared_norms"]
        vector_lines = ",\n".join(
            f"    {self.s.name(label)}: {{" + ", ".join(f"{self.s.name(i)}: {self.s.expr(v)}" for i, v in vectors[label].items())
            + "}" for label in vectors)
        norm_lines = "\n".join(f"    {self.s.name(label)}: {self.s.expr(v)}," for label, v in norms.items())
        code = f"""frame_order = [{", ".join(self.s.name(label) for label in order)}]
# The recorded frame vectors e_(a)^i (components not listed are zero) and squared norms N_(a).
recorded_vectors = {{
{vector_lines},
}}
recorded_norms = {{
{norm_lines}
}}
# The ranges given for sampling ([matter.region]): points where the frame exists are drawn from them.
frame_region = {self._frame_region()}
frame_point, frame_unnormalised = check_frame({self._id(step)}, {self.s.name(time)}, recorded_vectors, recorded_norms)
frame_vectors.update(recorded_vectors)
frame_norms.update(recorded_norms)
{self._done(step)}"""
        return "frame", code

    def _vectors_source(self, vectors: dict) -> str:
        """{label: {coordinate: component}} as Python source (labels as string literals)."""
        lines = ",\n".join(f"    {_label_literal(label)}: {{"
                            + ", ".join(f"{self.s.name(i)}: {self.s.expr(v)}" for i, v in components.items()) + "}"
                            for label, components in vectors.items())
        return "{\n" + lines + ",\n}" if lines else "{}"

    def given_frame(self, step):
        p = step.params
        index = "down" if p.get("index") == "down" else "up"
        code = f"""# The vectors as the metric file gives them ({'covector' if index == 'down' else 'vector'} components; those not listed are zero).
given = {self._vectors_source(p["given"])}
# The recorded vectors with upper indices, and the null tetrad built from an orthonormal frame (if any).
recorded = {self._vectors_source(step.result["vectors"])}
recorded_tetrad = {self._vectors_source(step.result.get("null_tetrad", {}))}
check_given_vectors({self._id(step)}, given, "{index}", recorded, recorded_tetrad)
given_frame_vectors.update(recorded)
given_tetrad.update(recorded_tetrad)
{self._done(step)}"""
        return "given_frame", code

    def given_frame_check(self, step):
        products = "[\n" + "".join(
            f"    {{\"first\": {_label_literal(q['first'])}, \"second\": {_label_literal(q['second'])}, "
            f"\"value\": {int(q['value'])}}},\n" for q in step.params.get("products", [])) + "]"
        code = f"""{self._holds(step)}
# Each product the vectors must have: g(first, second) = value (mbar is the complex conjugate of m).
products = {products}
verdict({self._id(step)}, recorded_holds, given_products(given_frame_vectors, products))"""
        return "given_frame_check", code

    def null_directions(self, step):
        entries = []
        for name, entry in step.params.get("directions", {}).items():
            source = "coordinate vector" if entry["source"] == "coordinate vector" else "coordinate gradient"
            upper = "{" + ", ".join(f"{self.s.name(i)}: {self.s.expr(v)}" for i, v in entry["upper"].items()) + "}"
            lower = "{" + ", ".join(f"{self.s.name(i)}: {self.s.expr(v)}" for i, v in entry["lower"].items()) + "}"
            entries.append(f"    {_label_literal(name)}: {{\"source\": \"{source}\", "
                           f"\"coordinate\": {self.s.name(entry['coordinate'])},\n"
                           f"        \"upper\": {upper},\n        \"lower\": {lower}}},")
        code = f"""{self._holds(step)}
# The recorded null directions: d_v where g_vv = 0, du where g^uu = 0 (components not listed are zero).
directions = {{
{chr(10).join(entries)}
}}
verdict({self._id(step)}, recorded_holds, null_direction_residues({self._id(step)}, directions))"""
        return "null_directions", code

    def null_dust(self, step):
        p = step.params
        if step.result.holds and "density" in p:
            code = f"""{self._holds(step)}
# The recorded density f of null dust along the recorded null vector k: T_ij = f k_i k_j.
null_dust_density = {self.s.expr(p["density"])}
verdict({self._id(step)}, recorded_holds, null_dust_residues({self._id(step)}, {_label_literal(p["direction"])}, null_dust_density))"""
        else:
            code = f"""{self._holds(step)}
# Not null dust along the first null vector tried: some T_ij - f k_i k_j does not vanish.
verdict({self._id(step)}, recorded_holds, null_dust_residues({self._id(step)}, {_label_literal(p["direction"])}, {self.s.expr(p["density"])}))"""
        return "null_dust", code

    def given_orthonormal_frame(self, step):
        order = step.params["order"]
        code = f"""frame_order = [{", ".join(self.s.name(label) for label in order)}]
# The recorded frame (the metric file's, checked in an earlier cell): e_(a) = w_(a) / sqrt(N_(a)) with w_(a) rational.
recorded_vectors = {self._vectors_source(step.result["vectors"])}
recorded_norms = {{{", ".join(f"{self.s.name(k)}: {self.s.expr(v)}" for k, v in step.result["squared_norms"].items())}}}
unnormalised = {self._vectors_source(step.params["unnormalised"])}
frame_region = {self._frame_region()}
frame_point = check_given_orthonormal_frame({self._id(step)}, recorded_vectors, recorded_norms, unnormalised)
frame_vectors.update(recorded_vectors)
frame_norms.update(recorded_norms)
frame_unnormalised = unnormalised
{self._done(step)}"""
        return "given_orthonormal_frame", code

    def frame_check(self, step):
        code = f"""{self._holds(step)}
# g(e_(a), e_(b)) - eta_(a)(b) from the recorded frame vectors, eta = diag(-1, 1, ..., 1).
residues = {{
    f"g(e_({{a}}), e_({{b}})) - eta": inner_product(frame_vectors[a], frame_vectors[b])
    - (0 if a != b else -1 if a == frame_order[0] else 1)
    for a, b in frame_pairs()
}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "frame_check", code

    def _frame_table(self, step, table: str, source: str, keys: str, topic: str, what: str):
        code = f"""# {what} (those not listed are zero).
recorded = {self.s.table(step.result)}
check_frame_table({self._id(step)}, recorded, {source}, {keys})
{table}.update(recorded)
{self._done(step)}"""
        return topic, code

    def frame_stress_energy(self, step):
        return self._frame_table(step, "frame_stress_energy", "stress_energy", "frame_pairs()", "frame_stress_energy",
                                 "T_(a)(b) for a <= b in the frame's order, both orders listed")

    def frame_ricci(self, step):
        return self._frame_table(step, "frame_ricci", "ricci", "frame_pairs()", "frame_ricci",
                                 "R_(a)(b) for a <= b in the frame's order, both orders listed")

    def frame_riemann(self, step):
        return self._frame_table(step, "frame_riemann", "riemann_lowered", "frame_riemann_index_sets()",
                                 "frame_riemann", "R_(a)(b)(c)(d) for a < b, c < d, (a, b) <= (c, d) in the frame's order")

    def density_and_pressures(self, step):
        result = step.result
        pressures = "{" + ", ".join(f"{self.s.name(k)}: {self.s.expr(v)}" for k, v in result["pressures"].items()) + "}"
        code = f"""recorded = {{
    "energy_density": {self.s.expr(result["energy_density"])},
    "pressures": {pressures},
    "diagonal": {bool(result["diagonal"])!r},
}}
check_density_and_pressures({self._id(step)}, recorded)
energy_density = recorded["energy_density"]
pressures.update(recorded["pressures"])
{self._done(step)}"""
        return "density_and_pressures", code

    def _frame_built(self) -> bool:
        return any(s.kind == "frame" and s.quantity == "" and s.component == "" and not isinstance(s.result, Verdict) for s in self.d.steps)

    def perfect_fluid(self, step):
        holds = step.result.holds
        if not self._frame_built():
            code = f"""{self._holds(step)}
# No orthonormal frame was built, so there is no observer to define rho and p: nothing to recompute.
if recorded_holds is not None or frame_vectors:
    raise AssertionError("step verdict/perfect_fluid: expected undecided, for lack of a frame")
print("verdict/perfect_fluid: undecided for lack of a frame, as recorded")"""
            return "verdict_perfect_fluid_no_frame", code
        lines = [self._holds(step), "# Off-diagonal frame components and differences of the principal pressures.",
                 "residues = perfect_fluid_frame_residues()"]
        if holds is True:
            lines += [f"verdict({self._id(step)}, recorded_holds, residues)",
                      "# The same in coordinates: T_ij = (rho + p) u_i u_j + p g_ij with u = e_(0).",
                      f"verdict({self._id(step)}, recorded_holds, perfect_fluid_residues())"]
        else:
            residue = step.params.get("residue")
            if holds is False and residue is not None:
                label = _label_literal(_residue_label(residue))
                lines += [f"# The recorded evidence names {label}: it must not vanish.",
                          f"if vanishes(residues[{label}]):",
                          f"    raise AssertionError(\"step verdict/perfect_fluid: the recorded evidence says \" + {label} + \" is not zero, but it vanishes\")"]
            lines.append(f"verdict({self._id(step)}, recorded_holds, residues)")
        return "verdict_perfect_fluid", "\n".join(lines)

    def energy_condition(self, step):
        name = step.component
        if name not in ("null", "weak", "strong", "dominant"):
            raise NotebookError(f"unknown energy condition {name!r}")
        rows = step.params.get("inequalities", {})
        if not rows and name == "strong" and len(self.s.coordinate_names) == 2:
            code = f"""{self._holds(step)}
# The strong condition divides by n - 2: it is not defined in two dimensions, so it must be undecided.
if recorded_holds is not None or dimension != 2:
    raise AssertionError("step {step.id}: in two dimensions the strong condition should be undecided")
print("{step.id}: undecided in two dimensions, as recorded")"""
            return "energy_condition_undecided", code
        if not rows:
            code = f"""{self._holds(step)}
# No inequality was decided: there is no frame, or T is not diagonal in it.
if recorded_holds is not None or (frame_vectors and stress_energy_diagonal_in_frame()):
    raise AssertionError("step {step.id}: the frame exists and T is diagonal in it, so this should have been decided")
print("{step.id}: undecided (no frame, or T not diagonal in it), as recorded")"""
            return "energy_condition_undecided", code
        route = step.params.get("route")
        if route in ("null dust", "null vectors"):
            return self.energy_condition_along_null(step, route, rows)
        table = ",\n".join(f"    {_label_literal(label)}: ({self.s.expr(row['value'])}, {row['holds']!r})"
                           for label, row in rows.items())
        lines = [self._holds(step),
                 "# Each inequality value >= 0: (the recorded value, the recorded answer).",
                 "recorded = {", table, "}",
                 f"check_inequality_values({self._id(step)}, \"{name}\", recorded)"]
        lines += [self._recheck_inequality(step, label, row) for label, row in rows.items()]
        lines += ["if combined_answer([answer for _, answer in recorded.values()]) != recorded_holds:",
                  f"    raise AssertionError(\"step {step.id}: the answers of the inequalities do not give the recorded answer\")",
                  f"print(\"{step.id}: {_ANSWER[step.result.holds]}, as recorded\")"]
        return "energy_condition", "\n".join(lines)

    def _recheck_inequality(self, step, label, row: dict) -> str:
        """The line that decides one recorded inequality again, the way the record says it was decided."""
        how, point = self._inequality_how(row)
        extra = "" if point is None else ", " + point
        signs = self._function_signs_source(row)
        if signs:
            extra += ", signs=" + signs
        return (f"recheck_inequality({self._id(step)}, {_label_literal(label)}, "
                f"recorded[{_label_literal(label)}][0], \"{how}\"{extra})")

    def energy_condition_along_null(self, step, route: str, rows: dict):
        """An energy condition read along null vectors: null dust (every condition holds exactly when f >= 0) or
        T_ab k^a k^b >= 0 along known null vectors (a negative value disproves the null condition; non-negative
        values decide nothing)."""
        lines = [self._holds(step), "# Each inequality value >= 0: (the recorded value, the recorded answer)."]
        table = ",\n".join(f"    {_label_literal(label)}: ({self.s.expr(row['value'])}, {row['holds']!r})"
                           for label, row in rows.items())
        lines += ["recorded = {", table, "}"]
        for label, row in rows.items():
            symbol = row.get("symbol", {})
            if symbol.get("kind") == "null dust density":
                recomputed = "null_dust_density"
            else:
                recomputed = f"along_null_vector({_label_literal(symbol.get('direction', ''))})"
            lines.append(f"check({self._id(step)}, recorded[{_label_literal(label)}][0], {recomputed}, "
                         f"part={_label_literal(label)})")
            lines.append(self._recheck_inequality(step, label, row))
        if route == "null dust":
            lines.append("# Null dust: the condition holds exactly when f >= 0, so its answer is that of f >= 0.")
            lines.append("expected = combined_answer([answer for _, answer in recorded.values()])")
        else:
            lines.append("# Along a few null vectors a negative value violates the null condition; non-negative values "
                         "decide nothing.")
            lines.append("expected = False if any(answer is False for _, answer in recorded.values()) else None")
        lines += ["if expected != recorded_holds:",
                  f"    raise AssertionError(\"step {step.id}: the answers of the inequalities do not give the recorded answer\")",
                  f"print(\"{step.id}: {_ANSWER[step.result.holds]}, as recorded\")"]
        topic = "energy_condition_null_dust" if route == "null dust" else "energy_condition_null_vectors"
        return topic, "\n".join(lines)

    def _inequality_how(self, row) -> tuple[str, str | None]:
        """How a recorded answer to value >= 0 was reached (the recorded decision), and the exact point
        where it was found negative, as Python source."""
        decision = Decision.from_data(row["decision"])
        method = decision.method
        if method is Method.IDENTICALLY_ZERO:
            return "zero", None
        if method is Method.DECLARED_SIGNS:
            return ("signs" if decision.holds else "negative"), None
        if method is Method.EXACT_POINT:
            return "point", self._point_source(decision.point)
        if method is Method.SAMPLED:
            return "sampled", None
        return "undecided", None

    def _function_signs_source(self, row) -> str:
        """The declared signs of free functions a recorded decision used, as Python source:
        {m(v): "nonnegative", Derivative(m(v), v): "positive"} ('' when it used none)."""
        decision = Decision.from_data(row["decision"])
        functions = {f.func.__name__: f for f in self.d.metric.functions}
        coordinates = {c.name: c for c in self.d.metric.coordinates}
        entries = []
        for sign in decision.function_signs:
            if sign.function not in functions or (sign.along and sign.along not in coordinates):
                raise NotebookError(f"a recorded decision names the sign of {sign.function!r}, which is not a "
                                    "function of the metric")
            f = functions[sign.function]
            target = sympy.Derivative(f, coordinates[sign.along]) if sign.along else f
            entries.append(f"{self.s.expr(target)}: \"{sign.sign}\"")
        return "{" + ", ".join(entries) + "}" if entries else ""

    def _point_source(self, point: dict) -> str:
        by_name = {s.name: s for _, s in self.s.symbols}
        by_name.update({s.name: s for _, s in self.s.others})
        entries = []
        for name, value in point.items():
            if name not in by_name:
                raise NotebookError(f"a recorded point names {name!r}, which is not a symbol of the derivation")
            entries.append(f"{self.s.expr(by_name[name])}: {self.s.expr(value)}")
        return "{" + ", ".join(entries) + "}"

    # [matter.model] -------------------------------------------------------------
    def _model_declaration(self) -> str:
        request = self.d.metric.matter
        model = request.model if request is not None else None
        if model is None:
            raise NotebookError("a matter-model step without [matter.model] in the recorded request")
        names = self.d.metric.names
        parts = [f'"kind": "{model.kind}"' if model.kind in MODEL_KINDS else None]
        if parts[0] is None:
            raise NotebookError(f"unknown matter model {model.kind!r}")
        for key in ("density", "pressure", "field", "potential"):
            value = getattr(model, key)
            if value is not None:
                parts.append(f'"{key}": {self.s.expr(value)}')
        for key, values in (("velocity", model.velocity), ("vector_potential", model.vector_potential)):
            if values:
                inner = ", ".join(f"{self.s.name(n)}: {self.s.expr(v)}" for n, v in zip(names, values) if v != 0)
                parts.append(f'"{key}": {{{inner}}}')
        parts.append(f'"time": {self.s.name(request.time.name)}')
        return "{" + ", ".join(parts) + "}"

    def model_stress_energy(self, step):
        p = step.params
        norm = ""
        if p.get("velocity_default") is False:
            norm = (f"\ncheck({self._id(step)}, {self.s.expr(p['normalisation'])}, sum(component(metric, i, j) * "
                    "expression(model_declaration['velocity'].get(i, 0)) * expression(model_declaration['velocity']"
                    ".get(j, 0)) for i in index_names for j in index_names), part=\"g_ab u^a u^b\")")
        code = f"""model_declaration = {self._model_declaration()}
# The recorded T_ab (a <= b; T_ba = T_ab, those not listed are zero).
recorded = {self.s.table(step.result)}
recorded.update({{(b, a): value for (a, b), value in list(recorded.items())}})
check_table({self._id(step)}, recorded, lambda a, b: model_stress_energy_from_declaration(model_declaration, a, b),
            every_index(2)){norm}
model_stress_energy.update(recorded)
{self._done(step)}"""
        return "model_stress_energy", code

    def model_equations(self, step):
        p = step.params
        duplicates = ",\n".join(f"    {self.s.key(k)}: ({self.s.key(v['of'])}, {self.s.expr(v['factor'])})"
                                for k, v in p["duplicates"].items())
        duplicates = ("\n" + duplicates + ",\n") if duplicates else ""
        zero = ", ".join(self.s.key(k) for k in p["identically_zero"])
        code = f"""model_unknowns = [{", ".join(self.s.expr(u) for u in p["unknowns"])}]
check({self._id(step)}, {self.s.expr(p["kappa"])}, kappa, part="kappa")
check({self._id(step)}, {self.s.expr(p["cosmological_constant"])}, cosmological_constant, part="Lambda")
# Each listed equation: the numerator of E_ij = G_ij + Lambda g_ij - kappa T_ij, factors that cannot vanish removed.
recorded = {self.s.table(step.result)}
# Components recorded as a multiple of a listed one (by the factor given), and those that vanish identically.
model_duplicates.update({{{duplicates}}})
check_model_equations({self._id(step)}, recorded, model_duplicates, [{zero}], model_unknowns)
model_equations.update(recorded)
{self._done(step)}"""
        return "model_equations", code

    def model_conservation(self, step):
        p = step.params
        recorded = ", ".join(f"{self.s.name(b)}: {self.s.expr(v)}" for b, v in step.result.items())
        follows = ",\n".join(
            f"    {self.s.key(k)}: ([{', '.join(self.s.key(o) for o in v['from'])}], {self.s.name(v['bianchi_component'])}, "
            f"{self.s.expr(v['coefficient'])})" for k, v in p["follows"].items())
        follows = ("\n" + follows + ",\n") if follows else ""
        independent = ", ".join(self.s.key(k) for k in p["independent"])
        code = f"""# nabla_a T^a_b for each b (those not listed vanish).
recorded = {{{recorded}}}
# Each equation recorded as following from others: (those others, the component b of the identity
# nabla^a E_ab = -kappa nabla_a T^a_b, the coefficient with which it enters undifferentiated).
recorded_follows = {{{follows}}}
check_model_conservation({self._id(step)}, recorded, recorded_follows, model_duplicates)
if sorted([{independent}] + list(recorded_follows)) != sorted(model_equations):
    raise AssertionError("step {step.id}: the independent equations and those that follow are not the listed ones")
{self._done(step)}"""
        return "model_conservation", code

    def model_solved(self, step):
        p = step.params
        definitions = ", ".join(f"({self.s.expr(old)}, {self.s.expr(new)})" for old, new in p.get("definitions", []))
        rows = []
        for eq in p["equations"]:
            if eq["source"] not in ("conservation", "field equation"):
                raise NotebookError(f"unknown source {eq['source']!r} of a solved equation")
            component = "(" + self.s.names(eq["component"]) + ("," if eq["source"] == "conservation" else "") + ")"
            replace = ", ".join(f"({self.s.expr(old)}, {self.s.expr(new)})" for old, new in eq["replace"])
            if eq["name"] not in ("mass", "redshift", "conservation", "tov", "friedmann", "acceleration", "continuity"):
                raise NotebookError(f"unknown solved equation {eq['name']!r}")
            rows.append(f'    {{"name": "{eq["name"]}", "lhs": {self.s.expr(eq["lhs"])}, '
                        f'"rhs": {self.s.expr(eq["rhs"])},\n     "source": "{eq["source"]}", "component": {component}, '
                        f'"replace": [{replace}]}},')
        code = f"""# The definitions put into the metric (old, new), then each equation lhs = rhs with where it came from and
# the replacements (old, new) that turn its source into 0.
model_definitions = [{definitions}]
recorded_equations = [
{chr(10).join(rows)}
]
check_model_solved({self._id(step)}, recorded_equations, model_definitions)
{self._done(step)}"""
        return "model_solved", code

    # ansatz -------------------------------------------------------------------
    def ansatz_equations(self, step):
        p = step.params
        request = self.d.metric.ansatz
        unknowns = list(request.unknowns) if request is not None else []
        if not unknowns:
            raise NotebookError("ansatz/equations without an [ansatz] request")
        duplicates = ",\n".join(f"    {self.s.key(k)}: ({self.s.key(v['of'])}, {self.s.expr(v['factor'])})"
                                for k, v in p["duplicates"].items())
        zero = ", ".join(self.s.key(k) for k in p["identically_zero"])
        duplicates = ("\n" + duplicates + ",\n") if duplicates else ""
        code = f"""ansatz_unknowns = [{", ".join(self.s.expr(u) for u in unknowns)}]
ansatz_constant = {self.s.expr(p["cosmological_constant"])}
# Each listed equation: the numerator of E_ij = G_ij + Lambda g_ij with the factors that cannot vanish removed.
recorded = {self.s.table(step.result)}
# Components recorded as a multiple of a listed one by a factor free of the unknowns, and those that vanish.
ansatz_duplicates.update({{{duplicates}}})
check_ansatz_equations({self._id(step)}, recorded, [{zero}])
ansatz_equations.update(recorded)
{self._done(step)}"""
        return "ansatz_equations", code

    def ansatz_dependence(self, step):
        result = step.result
        follows = ",\n".join(
            f"    {self.s.key(k)}: ([{', '.join(self.s.key(o) for o in v['from'])}], {self.s.name(v['bianchi_component'])}, "
            f"{self.s.expr(v['coefficient'])})" for k, v in result["follows"].items())
        relations = ",\n".join(f"    {self.s.name(b)}: [{', '.join(self.s.key(k) for k in keys)}]"
                               for b, keys in step.params["relations"].items())
        follows = ("\n" + follows + ",\n") if follows else ""
        code = f"""recorded_independent = [{", ".join(self.s.key(k) for k in result["independent"])}]
# Each equation recorded as following from others: (those others, the component of the identity, the
# coefficient with which it enters that component undifferentiated).
recorded_follows = {{{follows}}}
# The equations that enter each component of the identity.
recorded_relations = {{
{relations},
}}
check_dependence({self._id(step)}, recorded_independent, recorded_follows, recorded_relations)
{self._done(step)}"""
        return "ansatz_dependence", code

    def ansatz_solve(self, step):
        result = step.result
        branches = ", ".join(self.s.expr(b) for b in step.params.get("other_branches", []))
        code = f"""recorded = {{
    "equation": {self.s.expr(result["equation"])},
    "unknown": {self.s.expr(result["unknown"])},
    "solution": {self.s.expr(result["solution"])},
}}
other_branches = [{branches}]
check_ode_solution({self._id(step)}, {self.s.key(step.params["component"])}, recorded, other_branches)
ansatz_solution[recorded["unknown"]] = recorded["solution"]
{self._done(step)}"""
        return "ansatz_solve", code

    def ansatz_solution(self, step):
        if isinstance(step.result, Verdict) and step.result.holds is True:
            code = f"""{self._holds(step)}
# Recorded: every field equation vanishes identically, so any choice of the unknowns solves them.
if not recorded_holds or ansatz_solution:
    raise AssertionError("step ansatz/solution: recorded as solved by anything, but solutions were recorded")
for i, j in index_pairs():
    if not vanishes(sp.numer(sp.together(field_equation(i, j)))):
        raise AssertionError(f"step ansatz/solution: E_{{i}},{{j}} does not vanish identically")
print("ansatz/solution: every E_ij vanishes identically, as recorded")"""
            return "ansatz_identically_solved", code
        if isinstance(step.result, Verdict):
            code = f"""{self._holds(step)}
# Nothing was solved: there is no solution to put in.
if recorded_holds is not None or ansatz_solution:
    raise AssertionError("step ansatz/solution: recorded as unsolved, but solutions were recorded above")
print("ansatz/solution: not solved, as recorded")"""
            return "ansatz_unsolved", code
        request = self.d.metric.ansatz
        unknowns = {str(u): u for u in (request.unknowns if request is not None else ())}
        solution = ", ".join(f"{self.s.expr(unknowns[k])}: {self.s.expr(v)}" for k, v in step.params["solution"].items())
        constants = {s.name: s for _, s in self.s.others}
        rescalings = []
        for name, rescaling in step.params.get("rescalings", {}).items():
            coordinate_name = str(rescaling["coordinate"])
            if name not in constants:
                raise NotebookError(f"ansatz/solution: unknown constant {name!r}")
            rescalings.append(f"check_rescaling({self._id(step)}, {self.s.expr(constants[name])}, "
                              f"{self.s.name(coordinate_name)})")
        rescalings = "".join(line + "\n" for line in rescalings)
        code = f"""# The metric with the solution put in (both orders listed; those not listed are zero).
recorded = {self.s.table(step.result)}
recorded_solution = {{{solution}}}
check_same_solution({self._id(step)}, recorded_solution)
check_table({self._id(step)}, recorded, lambda i, j: component(metric, i, j).subs(ansatz_solution).doit(), every_index(2))
ansatz_metric.update(recorded)
{rescalings}{self._done(step)}"""
        return "ansatz_solution", code

    def ansatz_check(self, step):
        code = f"""{self._holds(step)}
# From scratch: the inverse, Christoffel symbols, Ricci tensor and Einstein tensor of the solved metric
# recorded above, with none of the values recorded for the ansatz metric.
ansatz_einstein = einstein_from_scratch(
    sp.Matrix(dimension, dimension, lambda row, column: component(ansatz_metric, index_names[row], index_names[column])))
residues = {{f"E_{{i}},{{j}}": ansatz_einstein[index_names.index(i), index_names.index(j)]
            + ansatz_constant * component(ansatz_metric, i, j) for i, j in index_pairs()}}
verdict({self._id(step)}, recorded_holds, residues)"""
        return "ansatz_check", code

    def ansatz_properties(self, step):
        r = step.result
        recorded = ", ".join(f'"{key}": {self.s.expr(r[key])}' for key in ("scalar", "kretschmann") if key in r)
        code = f"""# From scratch: the solved metric's Ricci tensor, scalar curvature and Kretschmann scalar (its own
# Christoffel symbols and Riemann tensor, nothing recorded for the ansatz metric).
recorded = {{{recorded}}}
recorded_einstein_constant = {self.s.expr(r["einstein_constant"])}
solved_ricci, solved_scalar, solved_kretschmann = invariants_from_scratch(
    sp.Matrix(dimension, dimension, lambda row, column: component(ansatz_metric, index_names[row], index_names[column])))
if "scalar" in recorded:
    check({self._id(step)}, recorded["scalar"], solved_scalar, "scalar curvature")
if "kretschmann" in recorded:
    check({self._id(step)}, recorded["kretschmann"], solved_kretschmann, "Kretschmann scalar")
check_solved_ricci({self._id(step)}, recorded_einstein_constant, solved_ricci)
{self._done(step)}"""
        return "ansatz_properties", code

    # geodesics ---------------------------------------------------------------
    def geodesic_equations(self, step):
        result = step.result
        position = "{" + ", ".join(f"{self.s.name(x)}: {self.s.expr(u)}" for x, u in result["position"].items()) + "}"
        accelerations = {(x,): v for x, v in result["velocity"].items()}
        accelerations = {",".join(k): v for k, v in accelerations.items()}
        metric_symbols = ", ".join(self.s.expr(x) for _, x in self.s.symbols)
        code = f"""# dx^a/dtau = u^a: the velocity components as recorded; they must be new symbols, not coordinates or
# parameters of the metric (the equations would confuse the two).
recorded_position = {position}
if set(recorded_position.values()) & {{{metric_symbols}}}:
    raise AssertionError("step geodesic_equations: a velocity component is also a symbol of the metric")
velocity.update(recorded_position)
# The recorded accelerations du^a/dtau (those not listed are zero).
recorded = {self.s.table(accelerations)}
check_table("geodesic_equations", recorded, geodesic_from_christoffel, [(a,) for a in index_names])
geodesic_acceleration.update({{a: component(recorded, a) for a in index_names}})
{self._done(step)}"""
        return "geodesic_equations", code

    def plot(self, plot) -> str:
        """The cell of one plot (stepper.plots): put the plot's values into the recorded results, evaluate them
        at the plot's points with sympy, assert that they agree with the values stepper drew (and, when it
        shades, that the same points fail the energy condition), and draw them with matplotlib."""
        import math
        from .latex import ExpressionWriter
        from .plots import DIGITS, INTERVALS, SHADE_TOLERANCE, notebook_samples
        s = self.s
        values = "{" + ", ".join(f"{s.expr(symbol)}: {s.expr(value)}" for symbol, value in plot.values) + "}"
        curves = "\n".join(f"        {c.tex!r}: {s.expr(c.recorded)}," for c in plot.curves)

        def number(v: float) -> str:
            return repr(v) if math.isfinite(v) else 'float("nan")'
        drawn = "\n".join(f"        {label!r}: {{{', '.join(f'{k}: {number(v)}' for k, v in samples.items())}}},"
                          for label, samples in notebook_samples(plot).items())
        inequalities = "\n".join(f"        {s.expr(v)}," for v in plot.shade_recorded)
        along = ExpressionWriter().symbol(plot.along.name)
        shade_words = (f"the points where one of the recorded inequalities (value >= 0) of the {plot.shade} energy "
                       f"condition is negative beyond {SHADE_TOLERANCE:g} times its largest size on the points: "
                       f"stepper shaded {sum(plot.failing)} of {len(plot.failing)}" if plot.shade else
                       "no energy condition is shaded")
        return f"""def check_plot():
    \"\"\"Plot {plot.number} ({plot.file_name} beside the report): the recorded results with the plot's values put in,
    at the {INTERVALS + 1} points stepper drew, to {DIGITS} digits; some must agree with the values stepper drew (doubles),
    and {shade_words}.\"\"\"
    import math
    along = {s.expr(plot.along)}
    values = {values}
    curves = {{
{curves}
    }}
    low, high = {s.expr(plot.low)}, {s.expr(plot.high)}
    points = [low + (high - low) * sp.Rational(k, {INTERVALS}) for k in range({INTERVALS + 1})]
    drawn = {{
{drawn}
    }}
    inequalities = [
{inequalities}
    ]

    def number_at(expression, point):
        value = sp.N(sp.Integer(expression) if isinstance(expression, int) else expression.subs(along, point), {DIGITS})
        return float(value) if value.is_real and value.is_finite else float("nan")

    data = {{}}
    for label, expression in curves.items():
        concrete = sp.Integer(expression) if isinstance(expression, int) else expression.subs(values)
        if concrete.free_symbols - {{along}}:
            raise AssertionError(f"plot {plot.number}: {{label}} still depends on {{concrete.free_symbols - {{along}}}}")
        data[label] = [number_at(concrete, x) for x in points]
        for k, theirs in drawn[label].items():
            mine = data[label][k]
            if not (math.isnan(mine) and math.isnan(theirs)) and not math.isclose(mine, theirs, rel_tol=1e-12, abs_tol=1e-300):
                raise AssertionError(f"plot {plot.number}: {{label}} at point {{k}} is {{mine}}, but stepper drew {{theirs}}")
    failing = [False] * len(points)
    for expression in inequalities:
        concrete = sp.Integer(expression) if isinstance(expression, int) else expression.subs(values)
        numbers = [number_at(concrete, x) for x in points]
        scale = max((abs(v) for v in numbers if math.isfinite(v)), default=0.0)
        for k, v in enumerate(numbers):
            if math.isfinite(v) and v < -{SHADE_TOLERANCE!r} * scale:
                failing[k] = True
    if sum(failing) != {sum(plot.failing)}:
        raise AssertionError(f"plot {plot.number}: {{sum(failing)}} points fail the energy condition, but stepper shaded {sum(plot.failing)}")
    print(f"plot {plot.number}: {{len(points)}} points of {{', '.join(data)}} agree with the values stepper drew")
    try:
        from matplotlib.figure import Figure
    except ImportError:
        print("matplotlib is not installed here: the values are checked, the plot is not drawn")
        return data
    import io
    from IPython.display import SVG, display
    figure = Figure(figsize=(6.2, 3.5))
    axes = figure.subplots()
    xs = [float(x) for x in points]
    for k, (label, ys) in enumerate(data.items()):
        axes.plot(xs, ys, ("-", "--", ":", "-.")[k % 4], label=f"${{label}}$", linewidth=max(2.6 - 0.5 * k, 1.0))
    for k, fails in enumerate(failing):
        if fails:
            axes.axvspan((xs[max(k - 1, 0)] + xs[k]) / 2, (xs[k] + xs[min(k + 1, len(xs) - 1)]) / 2,
                         color="#f3d3cf", linewidth=0, zorder=0)
    if {plot.logarithmic!r}:
        axes.set_yscale("log")
    axes.set_xlabel({f"${along}$"!r})
    axes.legend()
    picture = io.StringIO()
    figure.savefig(picture, format="svg")
    display(SVG(picture.getvalue()))
    return data


plot_data = check_plot()"""

    def orbit(self, step) -> str:
        orbit = step.params["orbit"]
        by_name = {s.name: s for _, s in self.s.symbols}
        values = "{" + ", ".join(f"{self.s.expr(by_name[k])}: {self.s.expr(v)}" for k, v in orbit["values"].items()) + "}"
        start = "{" + ", ".join(f"{self.s.name(k)}: {self.s.expr(v)}" for k, v in orbit["start"].items()) + "}"
        rates = "{" + ", ".join(f"{self.s.name(k)}: {self.s.expr(v)}" for k, v in orbit["velocity"].items()) + "}"
        kind = orbit["kind"]
        if kind not in ("timelike", "null"):
            raise NotebookError(f"unknown orbit kind {kind!r}")
        normalisation = -1 if kind == "timelike" else 0
        return f"""# The numeric part of this notebook: integrate the recorded geodesic equations along the recorded orbit with
# scipy, then check that what the exact equations conserve stays put.  Floating point, with stated tolerances.
import numpy as np
from scipy.integrate import solve_ivp

orbit_values = {values}  # the parameters
orbit_start = {start}  # x^a at tau = 0
orbit_rates = {rates}  # dx/dtau at tau = 0; the time rate follows
orbit_time = {self.s.name(orbit["time"])}
orbit_span = {self.s.expr(orbit["span"])}
orbit_normalisation = {normalisation}  # g_ab u^a u^b for a {kind} geodesic
orbit_tolerance = 1e-8  # largest drift allowed of g_ab u^a u^b and of each conserved momentum (relative when |p| > 1)


def orbit_time_rate():
    \"\"\"u^time at the start from g_ab u^a u^b = orbit_normalisation: the positive root (the larger if both are).\"\"\"
    at_start = {{coordinate[name]: orbit_start[name] for name in index_names}}
    g = metric_matrix().subs(orbit_values).subs(at_start)
    rate = sp.Dummy("rate")
    u = [rate if name == orbit_time else orbit_rates[name] for name in index_names]
    quadratic = sp.expand(sum((g[i, j] * u[i] * u[j] for i in range(dimension) for j in range(dimension)), sp.S.Zero)
                          - orbit_normalisation)
    roots = [root for root in sp.solve(quadratic, rate) if root.is_real and root.is_positive]
    return max(roots, key=float) if roots else None


def integrate_orbit():
    \"\"\"Integrate from tau = 0 to orbit_span with scipy's DOP853 (rtol 1e-10, atol 1e-12); print a few rows;
    assert that g_ab u^a u^b and the momentum g_xb u^b of every coordinate x the metric does not depend on
    (the energy -g_tb u^b for time) stay at their initial values within orbit_tolerance.\"\"\"
    time_rate = orbit_time_rate()
    if time_rate is None:
        print("orbit: no positive time rate satisfies the normalisation at the start; not integrated")
        return None
    concrete = metric_matrix().subs(orbit_values)
    metric_at = sp.lambdify([coordinates], concrete, "numpy")
    speeds = [velocity[name] for name in index_names]
    accelerations = sp.lambdify([coordinates, speeds],
                                [geodesic_acceleration[name].subs(orbit_values) for name in index_names], "math")
    state = [float(orbit_start[name]) for name in index_names] + \\
            [float(time_rate if name == orbit_time else orbit_rates[name]) for name in index_names]

    def right_hand_side(tau, y):
        return list(y[dimension:]) + list(accelerations(y[:dimension], y[dimension:]))

    solution = solve_ivp(right_hand_side, (0.0, float(orbit_span)), state, method="DOP853", rtol=1e-10, atol=1e-12,
                         dense_output=True)
    reached = float(solution.t[-1])
    if solution.status != 0:
        print(f"orbit: the integration stopped at tau = {{reached:.6g}} ({{solution.message}}); checked up to there")
    print(f"u^{{orbit_time}} at the start: {{time_rate}} = {{float(time_rate):.12g}}")
    print("      tau" + "".join(f"{{name:>16}}" for name in index_names))
    for tau in np.linspace(0.0, reached, 6):
        print(f"{{tau:9.4g}}" + "".join(f"{{value:16.8g}}" for value in solution.sol(tau)[:dimension]))
    samples = solution.sol(np.linspace(0.0, reached, 201))
    matrices = [np.array(metric_at(samples[:dimension, k]), dtype=float) for k in range(samples.shape[1])]
    norms = np.array([samples[dimension:, k] @ matrices[k] @ samples[dimension:, k] for k in range(samples.shape[1])])
    drift = float(np.max(np.abs(norms - norms[0])))
    print(f"g_ab u^a u^b: {{norms[0]:.15g}} at the start, largest drift {{drift:.2e}} (tolerance {{orbit_tolerance:g}})")
    if abs(norms[0] - orbit_normalisation) > 1e-12 or drift > orbit_tolerance:
        raise AssertionError("orbit: g_ab u^a u^b does not stay at its initial value within the tolerance")
    for position, name in enumerate(index_names):
        if concrete.has(coordinate[name]):
            continue
        momenta = np.array([matrices[k][position] @ samples[dimension:, k] for k in range(samples.shape[1])])
        drift = float(np.max(np.abs(momenta - momenta[0])))
        what = f"energy -g_{{name}}b u^b" if name == orbit_time else f"momentum g_{{name}}b u^b"
        print(f"{{what}}: {{-momenta[0] if name == orbit_time else momenta[0]:.15g}} at the start, largest drift {{drift:.2e}}")
        if drift > orbit_tolerance * max(1.0, abs(momenta[0])):
            raise AssertionError(f"orbit: the {{what}} is not conserved within the tolerance")
    return solution


orbit_solution = integrate_orbit()"""

    def orbit_plot(self, orbit) -> str:
        """The cell after the orbit's integration (stepper.plots.orbit_plot): the end point of scipy's solution
        against the end point of stepper's Runge-Kutta integration, then the orbit drawn from scipy's solution."""
        from .plots import ORBIT_DIGITS, ORBIT_END_TOLERANCE
        end = ", ".join(f"{self.s.name(c.name)}: {x!r}" for c, x in zip(self.d.metric.coordinates, orbit.end))
        kind, first, second = orbit.plane
        return f"""def check_orbit_plot():
    \"\"\"The orbit of {orbit.file_name} beside the report: stepper integrated the recorded equations with classical
    Runge-Kutta ({orbit.steps} steps, {ORBIT_DIGITS} digits) and ended at stepper_end; scipy's solution above must end at the same
    point within {ORBIT_END_TOLERANCE:g} (relative for values above 1).  Then the orbit is drawn from scipy's solution.\"\"\"
    import math
    stepper_end = {{{end}}}  # x^a at tau = stepper_reached
    stepper_reached = {orbit.reached!r}
    tolerance = {ORBIT_END_TOLERANCE!r}
    if orbit_solution is None:
        raise AssertionError("orbit: stepper integrated the orbit, but the cell above did not")
    if float(orbit_solution.t[-1]) < stepper_reached:
        raise AssertionError(f"orbit: scipy stopped at tau = {{orbit_solution.t[-1]}}, before stepper's end {{stepper_reached}}")
    mine = dict(zip(index_names, (float(v) for v in orbit_solution.sol(stepper_reached)[:dimension])))
    for name in index_names:
        difference = abs(mine[name] - stepper_end[name])
        print(f"{{name}} at tau = {{stepper_reached:g}}: scipy {{mine[name]:.12g}}, stepper {{stepper_end[name]:.12g}}, difference {{difference:.1e}}")
        if difference > tolerance * max(1.0, abs(stepper_end[name])):
            raise AssertionError(f"orbit: {{name}} at the end differs from stepper's by {{difference:.3g}}")
    print(f"the end point agrees with stepper's within {{tolerance:g}}")
    try:
        from matplotlib.figure import Figure
    except ImportError:
        print("matplotlib is not installed here: the end point is checked, the orbit is not drawn")
        return mine
    import io
    from IPython.display import SVG, display
    taus = np.linspace(0.0, stepper_reached, {len(orbit.x)})
    points = orbit_solution.sol(taus)
    first, second = points[index_names.index({self.s.name(first)})], points[index_names.index({self.s.name(second)})]
    polar = {kind == "polar"!r}
    xs, ys = (first * np.cos(second), first * np.sin(second)) if polar else (first, second)
    figure = Figure(figsize=(4.4, 4.4))
    axes = figure.subplots()
    axes.plot(xs, ys, "-", linewidth=0.8)
    axes.plot([xs[0]], [ys[0]], "o", color="C3", label="start")
    if polar:
        axes.plot([0.0], [0.0], "+", color="0.2", markersize=9, label="centre")
        axes.set_aspect("equal", adjustable="datalim")
    axes.set_xlabel({(f"{first} cos {second}" if kind == "polar" else first)!r})
    axes.set_ylabel({(f"{first} sin {second}" if kind == "polar" else second)!r})
    axes.legend(loc="upper right")
    picture = io.StringIO()
    figure.savefig(picture, format="svg")
    display(SVG(picture.getvalue()))
    return mine


orbit_end = check_orbit_plot()"""

    def not_recomputed(self, step):
        _step_literal(step.id)  # validates the id
        return ("# The notebook has no recomputation for this kind of step; it is shown, not checked.\n"
                f'print("{step.id}: not recomputed here")')


# --------------------------------------------------------------------------
# Assembly
# --------------------------------------------------------------------------

def _environment(templates: Sequence[Path] | None) -> jinja2.Environment:
    """The one template environment, with the notebook's markdown filters."""
    return template_environment(templates or (), filters={
        "text": _markdown_text, "line": lambda value: " ".join(_markdown_text(value).split()),
        "code": _inline_code, "fenced": _fenced})


#: ASCII characters that can start or shape Markdown (CommonMark with GitHub's extensions, as notebooks render
#: it): HTML, links, images, autolinks, emphasis, headings, lists, tables, quotes, code, footnotes; ':', '.'
#: and '@' so that no bare "https://", "javascript:", "www." or e-mail address is linked.
_MARKDOWN_SIGNIFICANT = frozenset("`*_{}[]()#+-.!|<>~&:=^@")
#: Characters that start math in a notebook ($, and \ before ( [ or begin): backslash escapes do not stop the
#: notebook's math renderer, which runs on the rendered page, so these are shown in code spans, where it never looks.
_MATH_STARTERS = re.compile(r"[$\\]+")


def _markdown_text(value) -> str:
    """Free text from an input file as Markdown that renders as that literal text and nothing else.

    Invisible characters are removed and leading blanks of each line dropped (no indented code block); each
    Markdown-significant ASCII character (``_MARKDOWN_SIGNIFICANT``) is backslash-escaped, so the text makes
    no link, image, autolink, HTML, heading, list, table, quote or emphasis; runs of ``$`` and ``\\`` become
    code spans, so it makes no math either: math comes only from stepper's own LaTeX."""
    return "\n".join(_markdown_line(line.lstrip()) for line in without_invisible(value).splitlines())


def _markdown_line(line: str) -> str:
    """One line of :func:`_markdown_text`."""
    pieces = []
    for plain, starters in zip(_MATH_STARTERS.split(line), _MATH_STARTERS.findall(line) + [""]):
        pieces.append("".join("\\" + c if c in _MARKDOWN_SIGNIFICANT else c for c in plain))
        if starters:
            pieces.append(f"`{starters}`")
    return "".join(pieces)


def _inline_code(value) -> str:
    text = " ".join(without_invisible(value).split())
    fence = "`" * (max((len(run) for run in re.findall(r"`+", text)), default=0) + 1)
    pad = " " if text.startswith("`") or text.endswith("`") else ""
    return f"{fence}{pad}{text}{pad}{fence}"


def _fenced(value) -> str:
    text = without_invisible(value).strip("\n")
    fence = "`" * max(3, max((len(run) for run in re.findall(r"`+", text)), default=0) + 1)
    return f"{fence}\n{text}\n{fence}"


def _setup_code(source: _Source, steps: Sequence[Step]) -> str:
    lines = ["# Plain sympy only: this notebook was written by stepper but does not import it.",
             "import itertools", "", "import sympy as sp"]
    if source.sympy_names:
        lines.append(f"from sympy import {', '.join(sorted(source.sympy_names))}")
    lines += ["", "# Coordinates and parameters with their declared assumptions."]
    lines += [source.symbol_definition(variable, symbol) for variable, symbol in source.symbols]
    if source.others:
        lines += ["", "# Symbols the derivation introduced (the differentials dx of the line element, integration constants,",
                  "# velocity components u_x = dx/dtau, constants used only by the field equations)."]
        lines += [source.symbol_definition(variable, symbol, declared=False) for variable, symbol in source.others]
    if source.functions:
        lines += ["", "# Free functions (their arguments are written where they are used)."]
        lines += [f'{variable} = sp.Function("{name}")' for name, variable in source.functions.items()]
    coordinate_vars = [source.identifiers[c] for c in source.coordinate_names]
    lines += ["",
              f"coordinates = [{', '.join(coordinate_vars)}]",
              f"index_names = [{', '.join(source.name(c) for c in source.coordinate_names)}]"
              "  # tensor indices are written with the coordinate names",
              "coordinate = dict(zip(index_names, coordinates))",
              "dimension = len(coordinates)", "", "", ""]
    blocks = [_HELPERS]
    if any(step.stage == "matter" or step.kind == "frame" for step in steps):
        blocks.append(_MATTER_HELPERS)
    if any(step.stage == "ansatz" for step in steps):
        blocks.append(_ANSATZ_HELPERS)
    if any(step.kind == "geodesic" for step in steps):
        blocks.append(_GEODESIC_HELPERS)
    if any(step.quantity in ("null_tetrad", "weyl_scalars", "algebraic_type") for step in steps):
        blocks.append(_PETROV_HELPERS)
    if any(step.stage == "model" for step in steps):
        blocks.append(_MODEL_HELPERS)
    return "\n".join(lines) + "\n\n\n".join(blocks)


def _new_cell(kind: str, source: str, number: int, step_id: str | None, part: str | None = None):
    maker = nbformat.v4.new_code_cell if kind == "code" else nbformat.v4.new_markdown_cell
    cell = maker(source=source)
    cell["id"] = f"cell-{number:04d}"
    cell["metadata"] = {"stepper": {"step": step_id, **({"part": part} if part else {})}} if step_id else {}
    return cell


def notebook_text(derivation: Derivation, templates: list[Path] | None = None) -> str:
    """The .ipynb as text (nbformat v4, deterministic).

    ``templates``: directories searched for ``notebook/*.j2`` before the
    project's own ``templates/`` directory.
    """
    env = _environment(templates)
    source = _Source(derivation)
    writer = _Cells(derivation, source)
    metric = derivation.metric
    step_template = env.get_template("notebook/step.md.j2")

    step_cells = []
    for number, step in enumerate(derivation.steps, start=1):
        topic, code = writer.for_step(step)
        verdict = step.result if isinstance(step.result, Verdict) else None
        text = step_template.render(step=step, number=number, topic=topic, verdict=verdict,
                                    dimension=metric.dimension)
        step_cells.append((step.id, text.strip("\n"), code, None))
        if step.kind == "geodesic" and step.params.get("orbit"):
            text = env.get_template("notebook/orbit.md.j2").render(step=step, number=number, orbit=step.params["orbit"],
                                                                   dimension=metric.dimension)
            step_cells.append((step.id, text.strip("\n"), writer.orbit(step), "orbit"))
            drawn = orbit_plot(derivation)
            if drawn is not None and drawn.drawn:  # the report's orbit plot: same end point, drawn from scipy's solution
                text = env.get_template("notebook/orbit_plot.md.j2").render(
                    orbit=drawn, number=number, digits=ORBIT_DIGITS, tolerance=f"{ORBIT_END_TOLERANCE:g}")
                step_cells.append((step.id, text.strip("\n"), writer.orbit_plot(drawn), "orbit_plot"))
    for plot in (p for p in derivation_plots(derivation) if p.drawn):  # after every step: the plots
        text = env.get_template("notebook/plot.md.j2").render(plot=plot, values=[(s.name, v) for s, v in plot.values])
        step_cells.append((None, text.strip("\n"), writer.plot(plot), "plot"))

    context = {
        "metric": metric,
        "coordinates": list(metric.names),
        "parameters": [(p.name, dict(metric.assumptions).get(p.name, "")) for p in metric.parameters],
        "functions": [(f.func.__name__, [a.name for a in f.args]) for f in metric.functions],
        "abbreviations": [(name, sympy.latex(value)) for name, value in metric.abbreviations],
        "conventions": derivation.conventions,
        "arithmetic": derivation.arithmetic,
        "step_count": len(derivation.steps),
        "partial": partial_words(derivation.stopped),
        "matter": any(step.stage == "matter" for step in derivation.steps),
        "ansatz": any(step.stage == "ansatz" for step in derivation.steps),
        "orbit": any(step.kind == "geodesic" and step.params.get("orbit") for step in derivation.steps),
    }
    cells = []

    def add(kind, text, step_id=None, part=None):
        cells.append(_new_cell(kind, text, len(cells) + 1, step_id, part))

    add("markdown", env.get_template("notebook/title.md.j2").render(**context).strip("\n"))
    add("markdown", env.get_template("notebook/setup.md.j2").render(**context).strip("\n"))
    add("code", _setup_code(source, derivation.steps))
    for step_id, text, code, part in step_cells:
        add("markdown", text, step_id, part)
        add("code", code, step_id, part)
    add("markdown", env.get_template("notebook/end.md.j2").render(**context).strip("\n"))
    add("code", f'print("All {len(derivation.steps)} recorded steps were recomputed and agree.")')

    nb = nbformat.v4.new_notebook()
    nb["cells"] = cells
    nb["metadata"] = {"kernelspec": dict(KERNELSPEC), "language_info": {"name": "python"}}
    nbformat.validate(nb)
    return nbformat.writes(nb) + "\n"


def write_notebook(derivation: Derivation, path: Path, templates: list[Path] | None = None) -> None:
    """Write the notebook to ``path`` atomically (see :func:`stepper.trace.write_atomically`)."""
    from .trace import write_atomically
    write_atomically(Path(path), notebook_text(derivation, templates))

