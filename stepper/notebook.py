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

from .algebra import as_expression
from .chain import Derivation
from .tracer import Step, Verdict

#: The project's own templates; user directories given to :func:`notebook_text` come first.
from .exporters import PROJECT_TEMPLATES  # noqa: E402  (one place decides where templates live)

KERNELSPEC = {"display_name": "Python 3", "language": "python", "name": "python3"}

_IDENTIFIER = re.compile(r"[A-Za-z][A-Za-z0-9_]*")
_STEP_ID = re.compile(r"[A-Za-z0-9_/,:]+")

#: Assumption words of a metric file -> keyword arguments of sympy.Symbol.
_ASSUMPTION_KEYWORDS = {
    "positive": ("real", "positive"),
    "negative": ("real", "negative"),
    "nonnegative": ("real", "nonnegative"),
    "nonpositive": ("real", "nonpositive"),
    "nonzero": ("real", "nonzero"),
    "real": ("real",),
    "complex": (),
}

#: Names the notebook defines itself; a metric symbol with one of these names
#: gets a different Python variable (its sympy name is unchanged).
_NOTEBOOK_NAMES = frozenset("""
    sp itertools coordinates index_names coordinate dimension component index_pairs riemann_index_sets
    every_index metric_matrix fill_lowered check_table check_summary identity sectional_curvature
    einstein_constant vanishes check verdict metric metric_derivatives metric_determinant inverse_metric
    christoffel christoffel_trace log_sqrt_det riemann ricci ricci_second_route scalar_curvature einstein
    riemann_lowered kretschmann_scalar weyl christoffel_from_metric riemann_from_christoffel ricci_from_riemann
    ricci_from_trace_identity scalar_from_ricci einstein_from_ricci lowered_from_riemann kretschmann_from_lowered
    weyl_from_lowered divergence_of_einstein recorded recorded_holds given residues
    polynomial_quotient mpmath christoffel_spot_check spot_check_deviation claimed derived claim_agrees
    opaque_atoms vanishes_with_roots trigonometric_rewrites
    kappa cosmological_constant stress_energy stress_energy_mixed stress_energy_up stress_energy_trace recorded_trace
    stress_energy_from_einstein mixed_stress_energy_from_lowered raised_stress_energy_from_lowered inner_product
    gram_schmidt_frame region_points sign_agrees check_with_root check_frame check_frame_table frame_pairs frame_unnormalised
    frame_riemann_index_sets frame_contraction frame_broken_at frame_vectors frame_norms frame_order frame_region
    frame_point recorded_vectors recorded_norms frame_stress_energy frame_ricci frame_riemann energy_density pressures
    check_density_and_pressures stress_energy_diagonal_in_frame energy_condition_values sign_decides
    recheck_inequality combined_answer check_inequality_values perfect_fluid_frame_residues perfect_fluid_residues
    field_equation involves_unknowns cannot_vanish check_nonzero_multiple check_ansatz_equations
    check_same_solution ordered_key divergence bianchi_coefficients check_dependence check_ode_solution
    check_rescaling einstein_from_scratch ansatz_equations ansatz_duplicates ansatz_solution ansatz_metric
    ansatz_unknowns ansatz_constant ansatz_einstein recorded_independent recorded_follows recorded_relations
    recorded_solution other_branches
    geodesic_from_christoffel velocity geodesic_acceleration recorded_position np solve_ivp orbit_values
    orbit_start orbit_rates orbit_time orbit_span orbit_normalisation orbit_tolerance orbit_time_rate
    integrate_orbit orbit_solution
""".split())


#: The only sympy names a printed expression may contain: the elementary functions a metric file may
#: use (see stepper.parse), their sympy spellings, and what the printer writes for numbers and derivatives.
_PRINTABLE_SYMPY_NAMES = frozenset("""
    sin cos tan cot sec csc sinh cosh tanh coth exp log sqrt Abs pi E I
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
        if word not in _ASSUMPTION_KEYWORDS:
            raise NotebookError(f"unknown assumption {word!r} for {symbol.name}")
        keywords = _ASSUMPTION_KEYWORDS[word]
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
    return sorted(found, key=lambda s: (s.name, sorted((k, str(v)) for k, v in s.assumptions0.items())))


_NUMBER = re.compile(r"-?[0-9]+(\.[0-9]+)?(e[-+]?[0-9]+)?")
_LABEL = re.compile(r"[A-Za-z0-9_ +\-*(),]+")
_ANSWER = {True: "holds", False: "does not hold", None: "undecided"}


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

_HELPERS = '''
def component(table, *indices):
    """A recorded tensor component, as a sympy object; components that were not recorded are zero."""
    return sp.sympify(table.get(indices, sp.S.Zero))


def index_pairs(strict=False):
    """(i, j) with i <= j (i < j when strict) in the coordinate order."""
    return [(i, j) for position, i in enumerate(index_names)
            for j in index_names[position + 1 if strict else position:]]


def every_index(rank):
    """Every tuple of `rank` index names."""
    return list(itertools.product(index_names, repeat=rank))


def riemann_index_sets():
    """(a, b, c, d) with a < b, c < d and (a, b) <= (c, d): the independent components of R_abcd."""
    pairs = index_pairs(strict=True)
    return [first + second for position, first in enumerate(pairs) for second in pairs[position:]]


def metric_matrix():
    """The recorded metric as a sympy Matrix."""
    return sp.Matrix(dimension, dimension,
                     lambda row, column: component(metric, index_names[row], index_names[column]))


def fill_lowered(table, recorded):
    """Store each recorded R_abcd under every index order R_abcd = -R_bacd = -R_abdc = R_cdab gives."""
    for (a, b, c, d), value in recorded.items():
        for (p, q, r, s) in ((a, b, c, d), (c, d, a, b)):
            table[p, q, r, s] = table[q, p, s, r] = value
            table[q, p, r, s] = table[p, q, s, r] = -value


# ---------------------------------------------------------------------------
# Deciding whether an expression is zero
# ---------------------------------------------------------------------------

trigonometric_rewrites = {
    sp.tan: lambda u: sp.sin(u) / sp.cos(u), sp.cot: lambda u: sp.cos(u) / sp.sin(u),
    sp.sec: lambda u: 1 / sp.cos(u), sp.csc: lambda u: 1 / sp.sin(u),
    sp.tanh: lambda u: sp.sinh(u) / sp.cosh(u), sp.coth: lambda u: sp.cosh(u) / sp.sinh(u)}


def opaque_atoms(expr):
    """(expr with roots and other functions replaced by fresh symbols, {root symbol: (base, q)}).

    Every power b**(p/q) with q > 1 becomes g**p for one fresh symbol g per (b, q), which satisfies
    g**q = b whatever branch the root takes (I is the root of -1); every |x| and every function other than sin, cos, sinh,
    cosh of a symbol or a free function becomes a fresh symbol with no relation.  A zero found with
    these symbols (and the relations g**q = b) is a proof; a non-zero is not."""
    for head, rule in trigonometric_rewrites.items():
        if expr.has(head):
            expr = expr.replace(head, rule)
    fresh, roots = {}, {}

    def root(base, q):
        key = ("root", base, q)
        if key not in fresh:
            fresh[key] = sp.Dummy("root")
            roots[fresh[key]] = (base, q)
        return fresh[key]

    def opaque(e):
        if e is sp.I:
            return root(sp.S.NegativeOne, 2)
        if e.is_Atom or isinstance(e, (sp.Derivative, sp.core.function.AppliedUndef)):
            return e
        if isinstance(e, (sp.sin, sp.cos, sp.sinh, sp.cosh)) and e.args[0].is_Symbol:
            return e
        if e.is_Pow and e.exp.is_Rational and not e.exp.is_Integer:
            return root(opaque(e.base), e.exp.q) ** e.exp.p
        if e.is_Add or e.is_Mul or (e.is_Pow and e.exp.is_Integer):
            return e.func(*[opaque(a) for a in e.args])
        if e not in fresh:
            fresh[e] = sp.Dummy("opaque")
        return fresh[e]

    return opaque(expr), roots


def polynomial_quotient(expr, roots=None):
    """expr as numerator / denominator, two polynomials in fresh symbols, if it is a rational function.

    Each sin(x), cos(x) (sinh(x), cosh(x)) of a symbol x becomes a fresh symbol
    s, c, and each free function and each of its derivatives a fresh symbol
    too; so does pi, which is transcendental.  Returns (numerator, denominator,
    relations) with one relation c**2 + s**2 - 1 (c**2 - s**2 - 1 for the
    hyperbolic pair) per pair, all three as elements of one polynomial ring
    with the cosines first in lex order; or None when expr holds anything else
    (exp, sqrt, log, ...).

    roots, from opaque_atoms, adds a relation g**q - b for each root symbol g
    whose base b is a polynomial free of other roots, with the roots first in
    lex order.  The relations' leading terms (g**q, c**2) share no variable, so
    they form a Groebner basis and the remainder of a division by them is unique.
    """
    roots = roots or {}
    for head, rule in trigonometric_rewrites.items():
        if expr.has(head):
            expr = expr.replace(head, rule)
    bases = {g: base for g, (base, _) in roots.items()}
    if expr.has(sp.pi) or any(base.has(sp.pi) for base in bases.values()):
        number = {sp.pi: sp.Dummy("pi", positive=True)}
        expr = expr.xreplace(number)
        bases = {g: base.xreplace(number) for g, base in bases.items()}
    everything = [expr] + list(bases.values())
    fresh, pairs = {}, []
    for cosine, sine, sign in ((sp.cos, sp.sin, 1), (sp.cosh, sp.sinh, -1)):
        for x in sorted({f.args[0] for e in everything for f in e.atoms(cosine, sine)}, key=sp.default_sort_key):
            if not x.is_Symbol:
                return None
            c, s = sp.Dummy("c"), sp.Dummy("s")
            fresh[cosine(x)], fresh[sine(x)] = c, s
            pairs.append((c, s, sign))
    for f in sorted({a for e in everything for a in e.atoms(sp.Derivative, sp.core.function.AppliedUndef)},
                    key=sp.default_sort_key):
        fresh[f] = sp.Dummy("f")
    plain = expr.xreplace(fresh)
    bases = {g: base.xreplace(fresh) for g, base in bases.items()}
    cosines, sines = [c for c, _, _ in pairs], [s for _, s, _ in pairs]
    root_symbols = sorted(roots, key=sp.default_sort_key)
    ordered = set(cosines) | set(sines) | set(root_symbols)
    rest = (plain.free_symbols | {x for base in bases.values() for x in base.free_symbols}) - ordered
    generators = root_symbols + cosines + sines + sorted(rest, key=sp.default_sort_key)
    ring, *variables = sp.ring(generators or [sp.Dummy("x")], sp.QQ, order="lex")
    variable = dict(zip(generators, variables))
    known = {}

    def quotient(e):
        """(numerator, denominator) of e, polynomials built without expanding sympy expressions."""
        if e in known:
            return known[e]
        if e.is_Symbol:
            result = (variable[e], ring.one)
        elif e.is_Rational:
            result = (ring(e.p), ring(e.q))
        elif e.is_Mul:
            numerator, denominator = ring.one, ring.one
            for factor in e.args:
                n, d = quotient(factor)
                numerator, denominator = numerator * n, denominator * d
            result = (numerator, denominator)
        elif e.is_Pow and e.exp.is_Integer:
            n, d = quotient(e.base)
            k = int(e.exp)
            result = (n**k, d**k) if k >= 0 else (d**-k, n**-k)
        elif e.is_Add:
            terms = [quotient(term) for term in e.args]
            common = ring.one
            for _, d in terms:
                common = common.lcm(d)
            result = (sum((n * common.exquo(d) for n, d in terms), ring.zero), common)
        else:
            raise ValueError(f"not a rational function: {e}")
        known[e] = result
        return result

    try:
        numerator, denominator = quotient(plain)
    except ValueError:
        return None
    relations = []
    for g in root_symbols:
        try:
            n, d = quotient(bases[g])
        except ValueError:
            continue
        if d == ring.one and not (bases[g].free_symbols & set(root_symbols)):
            relations.append(variable[g] ** roots[g][1] - n)
    relations += [variable[c]**2 + sign * variable[s]**2 - 1 for c, s, sign in pairs]
    return numerator, denominator, relations


def vanishes(expr):
    """Decide exactly whether expr is identically zero.

    For a rational function of the symbols, of sines and cosines (hyperbolic
    sines and cosines) of symbols and of free functions and their derivatives:
    expr is zero exactly when the remainder of its numerator, divided by the
    relations c**2 + s**2 - 1 (c**2 - s**2 - 1), is zero.  The relations'
    leading terms c**2 share no variable, so that remainder is unique.
    Anything else is left to sp.simplify.
    """
    expr = sp.sympify(expr)
    if expr == 0:
        return True
    parts = polynomial_quotient(expr)
    if parts is not None:
        numerator, denominator, relations = parts
        if denominator.rem(relations) != 0:
            return numerator.rem(relations) == 0
    if vanishes_with_roots(expr):
        return True
    return sp.simplify(expr) == 0


def vanishes_with_roots(expr):
    """True when expr is zero with every root, |x| and other function treated as a new symbol, and each
    root g of a polynomial b reduced by g**q = b (see opaque_atoms): a proof that it vanishes.  False
    means only that this test did not show it."""
    expr = sp.sympify(expr)
    if expr == 0:
        return True
    parts = polynomial_quotient(*opaque_atoms(expr))
    if parts is None:
        return False
    numerator, denominator, relations = parts
    return denominator.rem(relations) != 0 and numerator.rem(relations) == 0


def check(step, recorded, recomputed, part=None):
    """Raise AssertionError naming the step unless recorded == recomputed exactly."""
    if not vanishes(sp.sympify(recomputed) - sp.sympify(recorded)):
        where = f"step {step}" + (f", {part}" if part else "")
        shown = str(recorded)
        shown = shown if len(shown) <= 200 else shown[:200] + " ..."
        raise AssertionError(f"{where}: the recorded value {shown} differs from the value recomputed here")


def check_table(step, recorded, recompute, keys):
    """check() every component in keys: the recorded one (zero when not listed) against recompute(*key)."""
    for key in keys:
        check(step, component(recorded, *key), recompute(*key), part=f"component {key}")


def check_summary(step, recorded, table, recompute, keys):
    """A summary lists the non-zero components: each listed one must be the value its own step
    recorded, and each of keys not listed must recompute to zero."""
    for key, value in recorded.items():
        check(step, value, component(table, *key), part=f"listed component {key}")
    for key in keys:
        if key not in recorded:
            check(step, 0, recompute(*key), part=f"unlisted component {key}")


def verdict(step, recorded_holds, residues):
    """Check a recorded yes/no answer against residues recomputed here.

    Each residue is zero exactly when the statement holds for that component.
    recorded_holds True: every residue must vanish; False: at least one must
    not; None (undecided when the derivation ran): nothing is asserted.
    """
    if recorded_holds is None:
        print(f"{step}: recorded as undecided, so no residue is asserted here")
        return
    for label, residue in residues.items():
        if not vanishes(residue):
            if recorded_holds:
                raise AssertionError(f"step {step}: recorded as holding, but {label} does not vanish")
            print(f"{step}: does not hold ({label} does not vanish), as recorded")
            return
    if not recorded_holds:
        raise AssertionError(f"step {step}: recorded as not holding, but all {len(residues)} residues vanish")
    print(f"{step}: holds ({len(residues)} residues vanish), as recorded")


# ---------------------------------------------------------------------------
# The general formulas, each evaluated on values recorded by earlier cells
# ---------------------------------------------------------------------------

def christoffel_from_metric(a, b, c):
    """Gamma^a_bc = 1/2 g^ad (d_b g_dc + d_c g_db - d_d g_bc)."""
    return sp.Rational(1, 2) * sum(
        (component(inverse_metric, a, d) * (component(metric_derivatives, b, d, c)
                                            + component(metric_derivatives, c, d, b)
                                            - component(metric_derivatives, d, b, c))
         for d in index_names), sp.S.Zero)


def riemann_from_christoffel(a, b, c, d):
    """R^a_bcd = d_c Gamma^a_db - d_d Gamma^a_cb + Gamma^a_ce Gamma^e_db - Gamma^a_de Gamma^e_cb."""
    value = (sp.diff(component(christoffel, a, d, b), coordinate[c])
             - sp.diff(component(christoffel, a, c, b), coordinate[d]))
    for e in index_names:
        value += component(christoffel, a, c, e) * component(christoffel, e, d, b)
        value -= component(christoffel, a, d, e) * component(christoffel, e, c, b)
    return value


def ricci_from_riemann(b, d):
    """R_bd = R^a_bad."""
    return sum((component(riemann, a, b, a, d) for a in index_names), sp.S.Zero)


def ricci_from_trace_identity(i, j):
    """R_ij = d_l Gamma^l_ij - d_i d_j ln sqrt|g| + Gamma^a_ij d_a ln sqrt|g| - Gamma^l_ia Gamma^a_jl."""
    value = sum((sp.diff(component(christoffel, l, i, j), coordinate[l]) for l in index_names), sp.S.Zero)
    value -= sp.diff(log_sqrt_det[i], coordinate[j])
    for a in index_names:
        value += component(christoffel, a, i, j) * log_sqrt_det[a]
        for l in index_names:
            value -= component(christoffel, l, i, a) * component(christoffel, a, j, l)
    return value


def scalar_from_ricci():
    """R = g^ij R_ij."""
    return sum((component(inverse_metric, i, j) * component(ricci, i, j)
                for i in index_names for j in index_names), sp.S.Zero)


def einstein_from_ricci(i, j):
    """G_ij = R_ij - R g_ij / 2."""
    return component(ricci, i, j) - scalar_curvature * component(metric, i, j) / 2


def lowered_from_riemann(a, b, c, d):
    """R_abcd = g_ae R^e_bcd."""
    return sum((component(metric, a, e) * component(riemann, e, b, c, d) for e in index_names), sp.S.Zero)


def kretschmann_from_lowered():
    """K = R_abcd R^abcd = R^ab_cd R^cd_ab with R^ab_cd = g^ae g^bf R_efcd, summed as
    4 times the sum over a < b and c < d (both pairs are antisymmetric)."""
    pairs = index_pairs(strict=True)
    mixed = {}
    for a, b in pairs:
        for c, d in pairs:
            total = sp.S.Zero
            for e, f in every_index(2):
                factor = component(inverse_metric, a, e) * component(inverse_metric, b, f)
                if factor != 0:
                    total += factor * component(riemann_lowered, e, f, c, d)
            mixed[a, b, c, d] = total
    return 4 * sum((mixed[a, b, c, d] * mixed[c, d, a, b] for a, b in pairs for c, d in pairs), sp.S.Zero)


def weyl_from_lowered(a, b, c, d):
    """C_abcd = R_abcd - (g_ac R_bd - g_ad R_bc - g_bc R_ad + g_bd R_ac)/(n-2)
    + R (g_ac g_bd - g_ad g_bc)/((n-1)(n-2))."""
    g = lambda i, j: component(metric, i, j)
    R = lambda i, j: component(ricci, i, j)
    n = dimension
    return (component(riemann_lowered, a, b, c, d)
            - (g(a, c) * R(b, d) - g(a, d) * R(b, c) - g(b, c) * R(a, d) + g(b, d) * R(a, c)) / (n - 2)
            + scalar_curvature * (g(a, c) * g(b, d) - g(a, d) * g(b, c)) / ((n - 1) * (n - 2)))


def divergence_of_einstein(b):
    """nabla^a G_ab = g^ac (d_c G_ab - Gamma^e_ca G_eb - Gamma^e_cb G_ae)."""
    total = sp.S.Zero
    for a in index_names:
        for c in index_names:
            inverse = component(inverse_metric, a, c)
            if inverse == 0:
                continue
            term = sp.diff(component(einstein, a, b), coordinate[c])
            for e in index_names:
                term -= component(christoffel, e, c, a) * component(einstein, e, b)
                term -= component(christoffel, e, c, b) * component(einstein, a, e)
            total += inverse * term
    return total


# The recorded values, filled in by the step cells below (missing components are zero).
metric, metric_derivatives, inverse_metric = {}, {}, {}
christoffel, christoffel_trace, log_sqrt_det = {}, {}, {}
riemann, ricci, ricci_second_route, einstein = {}, {}, {}, {}
riemann_lowered, weyl = {}, {}
'''.strip("\n")

_MATTER_HELPERS = '''
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
    names = set(symbols) | {s for norm in norms.values() for s in sp.sympify(norm).free_symbols}
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
        if all(sp.sympify(norm).subs(point).is_positive is True for norm in norms.values()):
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
    product = sp.factor(sp.sympify(first) * sp.sympify(second))
    real = {f: sp.Dummy("f", real=True, nonzero=True)
            for f in sorted(product.atoms(sp.Derivative, sp.core.function.AppliedUndef), key=sp.default_sort_key)}
    if product.subs(real).is_nonnegative is True:
        return True
    point = frame_point if point is None else point
    if point is None:
        return None
    a, b = (sp.N(sp.sympify(value).subs(point), 40) for value in (first, second))
    if not (a.is_real and b.is_real):
        return None
    return not (a * b < 0)


def check_with_root(step, recorded, rational, radicand, part):
    """recorded must be rational / sqrt(radicand) with the positive root: recorded**2 * radicand = rational**2
    exactly, and recorded has the sign of rational (sign_agrees)."""
    where = f"step {step}, {part}"
    if not vanishes(sp.expand(sp.sympify(recorded) ** 2) * radicand - rational ** 2):
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
    symbols = set().union(*(sp.sympify(value).free_symbols for vector in vectors.values() for value in vector.values()))
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


def sign_decides(value, nonnegative):
    """Whether sympy's assumptions, from the declared signs alone, show value >= 0 (nonnegative=True) or
    value < 0 (nonnegative=False).  value and kappa * value (kappa > 0) are factored and tried as they are
    and as numerator * denominator (the sign of n/d wherever d != 0), with each free function and each
    derivative taken as a real symbol (a metric is real)."""
    forms = []
    for form in (sp.factor(value), sp.factor(kappa * value)):
        numerator, denominator = sp.fraction(form)
        forms += [form, numerator * denominator]
    for form in forms:
        real = {f: sp.Dummy("f", real=True)
                for f in sorted(form.atoms(sp.Derivative, sp.core.function.AppliedUndef), key=sp.default_sort_key)}
        plain = form.subs(real)
        if (plain.is_nonnegative if nonnegative else plain.is_negative) is True:
            return True
    return False


def recheck_inequality(step, label, value, how, point=None):
    """Re-check one recorded answer to value >= 0.

    how is "zero" (identically 0), "signs" (>= 0 by the declared signs), "negative" (< 0 by the declared
    signs), "point" (< 0 at the recorded exact point), "search" (< 0 at some point of the region),
    "sampled" (>= 0 at points of the region: evidence, not proof) or "undecided" (nothing to assert)."""
    where = f"step {step}, {label}"
    if how == "zero" and not vanishes(value):
        raise AssertionError(f"{where}: recorded as identically 0, but it is not")
    if how == "signs" and not sign_decides(value, True):
        raise AssertionError(f"{where}: recorded as >= 0 by the declared signs, which sympy does not confirm")
    if how == "negative" and not sign_decides(value, False):
        raise AssertionError(f"{where}: recorded as < 0 by the declared signs, which sympy does not confirm")
    if how == "point":
        here = sp.sympify(value).subs(point)
        if here.is_negative is not True:
            raise AssertionError(f"{where}: recorded as negative at {point}, but there it equals {here}")
    if how == "search":
        points = region_points(sp.sympify(value).free_symbols, 50)
        if not any(sp.sympify(value).subs(here).is_negative for here in points):
            raise AssertionError(f"{where}: recorded as violated, but it is >= 0 at {len(points)} points of the region")
        print(f"{step}: {label} is negative at a point of the region, as recorded")
        return
    if how == "sampled":
        points = region_points(sp.sympify(value).free_symbols, 5)
        for here in points:
            if sp.sympify(value).subs(here).is_negative:
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


# The recorded matter quantities, filled in by the step cells below.
stress_energy, stress_energy_mixed, stress_energy_up = {}, {}, {}
frame_vectors, frame_norms, frame_order, frame_region, frame_point, frame_unnormalised = {}, {}, [], {}, None, {}
frame_stress_energy, frame_ricci, frame_riemann, pressures = {}, {}, {}, {}
'''.strip("\n")


_ANSATZ_HELPERS = '''
# ---------------------------------------------------------------------------
# Ansatz: the field equations for unknown functions, their dependence, their solution
# ---------------------------------------------------------------------------

def field_equation(i, j):
    """E_ij = G_ij + Lambda g_ij from the recorded Einstein tensor and metric (Lambda of the ansatz)."""
    return component(einstein, i, j) + ansatz_constant * component(metric, i, j)


def involves_unknowns(expr):
    """Whether expr contains one of the unknown functions (or a derivative of one)."""
    heads = {unknown.func for unknown in ansatz_unknowns}
    return any(f.func in heads for f in sp.sympify(expr).atoms(sp.core.function.AppliedUndef))


def cannot_vanish(factor):
    """Whether a factor that involves the unknowns cannot vanish: an unknown function that divides the
    numerator or denominator of the recorded determinant or, for a diagonal metric, of a diagonal component
    (the metric is non-degenerate and finite), or an exponential (of a real quantity)."""
    if isinstance(factor, sp.exp) or (factor.is_Pow and isinstance(factor.base, sp.exp)):
        return True
    diagonal = all(vanishes(component(metric, i, j)) for i, j in index_pairs(strict=True))
    sources = [metric_determinant] + ([component(metric, x, x) for x in index_names] if diagonal else [])
    divisors = [f for source in sources if not vanishes(source)
                for part in sp.fraction(sp.together(source)) for f, _ in sp.factor_list(part)[1]]
    return factor in ansatz_unknowns and factor in divisors


def check_nonzero_multiple(step, recorded, expression, part):
    """recorded must be expression divided by a factor that cannot vanish: a product of factors free of the
    unknowns (not identically zero), of unknowns that divide the determinant, and of exponentials."""
    where = f"step {step}, {part}"
    if vanishes(recorded):
        raise AssertionError(f"{where}: the recorded equation is identically zero")
    ratio = sp.factor(sp.cancel(sp.together(sp.sympify(expression) / recorded)))
    numerator, denominator = sp.fraction(ratio)
    if vanishes(numerator):
        raise AssertionError(f"{where}: the recomputed expression is zero, the recorded equation is not")
    for side in (numerator, denominator):
        for factor, _ in sp.factor_list(side)[1]:
            if involves_unknowns(factor) and not cannot_vanish(factor):
                raise AssertionError(f"{where}: the recorded equation is not the recomputed one up to a factor "
                                     f"that cannot vanish (the ratio has the factor {factor})")


def check_ansatz_equations(step, recorded, zero):
    """Each listed equation against the numerator of E_ij recomputed here; each duplicate against its
    representative; each identically vanishing component; and every component accounted for once."""
    for key, equation in recorded.items():
        check_nonzero_multiple(step, equation, sp.numer(sp.together(field_equation(*key))), part=f"E_{key}")
    for key, (representative, factor) in ansatz_duplicates.items():
        if vanishes(factor) or any(involves_unknowns(f) and not cannot_vanish(f)
                                   for part in sp.fraction(sp.factor(sp.sympify(factor)))
                                   for f, _ in sp.factor_list(part)[1]):
            raise AssertionError(f"step {step}: the factor of E_{key} must be a product of factors that cannot "
                                 "vanish")
        check(step, factor * field_equation(*representative), field_equation(*key), part=f"E_{key} as a duplicate")
    for key in zero:
        check(step, 0, field_equation(*key), part=f"E_{key}")
    listed = list(recorded) + list(ansatz_duplicates) + list(zero)
    if sorted(listed) != sorted(index_pairs()):
        raise AssertionError(f"step {step}: the components accounted for are {sorted(listed)}")


def check_same_solution(step, recorded_solution):
    """The solution recorded with the metric is the one the solving steps recorded."""
    if set(recorded_solution) != set(ansatz_solution):
        raise AssertionError(f"step {step}: solved for {list(recorded_solution)}, the steps above for {list(ansatz_solution)}")
    for unknown, value in recorded_solution.items():
        check(step, value, ansatz_solution[unknown], part=str(unknown))


def ordered_key(i, j):
    """The index pair in coordinate order, as the recorded equations are keyed."""
    return (i, j) if index_names.index(i) <= index_names.index(j) else (j, i)


def divergence(tensor, b):
    """nabla^a E_ab = g^ac (d_c E_ab - Gamma^e_ca E_eb - Gamma^e_cb E_ae) for E given as a function of index names."""
    total = sp.S.Zero
    for a in index_names:
        for c in index_names:
            inverse = component(inverse_metric, a, c)
            if inverse == 0:
                continue
            term = sp.diff(tensor(a, b), coordinate[c])
            for e in index_names:
                term -= component(christoffel, e, c, a) * tensor(e, b)
                term -= component(christoffel, e, c, b) * tensor(a, e)
            total += inverse * term
    return total


def bianchi_coefficients(b):
    """Component b of the contracted Bianchi identity with each listed equation E_ij replaced by an
    undetermined function of all coordinates (each duplicate by its factor times its representative, every
    other component by zero): {key: (coefficient of E_key, [coefficients of its derivatives])}."""
    unknown_equations = {key: sp.Function("E_" + "_".join(key))(*coordinates) for key in ansatz_equations}

    def placeholder(i, j):
        key = ordered_key(i, j)
        if key in unknown_equations:
            return unknown_equations[key]
        if key in ansatz_duplicates:
            representative, factor = ansatz_duplicates[key]
            return factor * unknown_equations[representative]
        return sp.S.Zero

    relation = sp.expand(divergence(placeholder, b))
    derivatives = {d: sp.Dummy("dE") for d in sorted(relation.atoms(sp.Derivative), key=sp.default_sort_key)}
    values = {key: sp.Dummy("E") for key in unknown_equations}
    plain = relation.xreplace(derivatives).xreplace({unknown_equations[key]: values[key] for key in values})
    return {key: (sp.diff(plain, values[key]),
                  [sp.diff(plain, fresh) for d, fresh in derivatives.items() if d.expr == unknown_equations[key]])
            for key in unknown_equations}


def check_dependence(step, independent, follows, relations):
    """Recompute which equations enter each component of the identity, and that each equation recorded as
    following from the others enters its component undifferentiated with the recorded coefficient."""
    for b in index_names:
        coefficients = bianchi_coefficients(b)
        present = {key for key, (value, derivatives) in coefficients.items()
                   if not vanishes(value) or not all(vanishes(d) for d in derivatives)}
        if present != set(relations[b]):
            raise AssertionError(f"step {step}: component {b} of the identity involves {sorted(present)}, "
                                 f"recorded {sorted(relations[b])}")
        for key, (source, component_name, coefficient) in follows.items():
            if component_name != b:
                continue
            value, derivatives = coefficients[key]
            check(step, coefficient, value, part=f"coefficient of E_{key} in component {b}")
            factors = sp.factor_list(sp.numer(sp.together(coefficient)))[1]
            if vanishes(coefficient) or any(involves_unknowns(f) and not cannot_vanish(f) for f, _ in factors):
                raise AssertionError(f"step {step}: the coefficient of E_{key} in component {b} may vanish, so "
                                     f"E_{key} does not follow where it does")
            if not all(vanishes(d) for d in derivatives):
                raise AssertionError(f"step {step}: E_{key} is differentiated in component {b} of the identity")
            if set(source) != present - {key} or not set(source) <= set(independent):
                raise AssertionError(f"step {step}: E_{key} does not follow from the equations recorded")
    expected = [key for key in ansatz_equations if key not in follows]
    if list(independent) != expected:
        raise AssertionError(f"step {step}: the independent equations are {expected}, recorded {list(independent)}")


def check_ode_solution(step, key, recorded, other_branches):
    """The equation solved is the reduced E_key with the earlier solutions put in (up to a factor that
    cannot vanish), it holds one unsolved unknown, and each recorded solution satisfies it."""
    expected = ansatz_equations[key]
    if ansatz_solution:
        expected = sp.numer(sp.together(expected.subs(ansatz_solution).doit()))
    check_nonzero_multiple(step, recorded["equation"], expected, part="the equation")
    unknown = recorded["unknown"]
    left = [f for f in ansatz_unknowns if f not in ansatz_solution and recorded["equation"].has(f)]
    if left != [unknown]:
        raise AssertionError(f"step {step}: the equation involves the unsolved unknowns {left}, not {unknown} alone")
    for number, solution in enumerate([recorded["solution"]] + list(other_branches)):
        if not vanishes(recorded["equation"].subs(unknown, solution).doit()):
            which = "the solution" if number == 0 else f"branch {number + 1}"
            raise AssertionError(f"step {step}: {which} does not satisfy the equation")


def check_rescaling(step, constant, name):
    """constant appears in g_(name name) alone, as a factor that is a function of it alone, and no component
    depends on the coordinate name: rescaling that coordinate removes it."""
    holders = [(i, j) for i, j in index_pairs() if component(ansatz_metric, i, j).has(constant)]
    if holders != [(name, name)] or any(sp.sympify(value).has(coordinate[name]) for value in ansatz_metric.values()):
        raise AssertionError(f"step {step}: {constant} cannot be removed by rescaling {name}")
    _, rest = sp.factor(component(ansatz_metric, name, name)).as_independent(constant, as_Add=False)
    if rest.free_symbols != {constant}:
        raise AssertionError(f"step {step}: g_{name},{name} is not a function of {constant} alone times a factor free of it")


def einstein_from_scratch(matrix):
    """G_ij of a metric matrix computed from nothing recorded: its inverse, Christoffel symbols
    Gamma^a_bc = 1/2 g^ad (d_b g_dc + d_c g_db - d_d g_bc), the Ricci tensor
    R_bd = d_a Gamma^a_db - d_d Gamma^a_ab + Gamma^a_ae Gamma^e_db - Gamma^a_de Gamma^e_ab, and
    G_bd = R_bd - R g_bd / 2."""
    n = dimension
    inverse = matrix.inv().applyfunc(sp.cancel)
    x = coordinates
    dg = [matrix.diff(x[k]) for k in range(n)]
    gamma = [[[sp.cancel(sum((inverse[a, d] * (dg[b][d, c] + dg[c][d, b] - dg[d][b, c]) for d in range(n)), sp.S.Zero) / 2)
               for c in range(n)] for b in range(n)] for a in range(n)]
    ricci_matrix = sp.zeros(n, n)
    for b in range(n):
        for d in range(b, n):
            value = sum((sp.diff(gamma[a][d][b], x[a]) - sp.diff(gamma[a][a][b], x[d]) for a in range(n)), sp.S.Zero)
            for a in range(n):
                for e in range(n):
                    value += gamma[a][a][e] * gamma[e][d][b] - gamma[a][d][e] * gamma[e][a][b]
            ricci_matrix[b, d] = ricci_matrix[d, b] = sp.cancel(value)
    scalar = sp.cancel(sum((inverse[b, d] * ricci_matrix[b, d] for b in range(n) for d in range(n)), sp.S.Zero))
    return (ricci_matrix - scalar * matrix / 2).applyfunc(sp.cancel)


# The recorded ansatz quantities, filled in by the step cells below.
ansatz_equations, ansatz_duplicates, ansatz_solution, ansatz_metric = {}, {}, {}, {}
'''.strip("\n")


_GEODESIC_HELPERS = '''
# ---------------------------------------------------------------------------
# Geodesics
# ---------------------------------------------------------------------------

def geodesic_from_christoffel(a):
    """du^a/dtau = -Gamma^a_bc u^b u^c, summed over all b and c."""
    return -sum((component(christoffel, a, b, c) * velocity[b] * velocity[c]
                 for b in index_names for c in index_names), sp.S.Zero)


# The velocity symbols u^x and the recorded accelerations, filled in by the geodesic cell.
velocity, geodesic_acceleration = {}, {}
'''.strip("\n")


# --------------------------------------------------------------------------
# Step cells
# --------------------------------------------------------------------------

class _Cells:
    """Writes the code (and chooses the explanation topic) of one step's cells."""

    def __init__(self, derivation: Derivation, source: _Source):
        self.d = derivation
        self.s = source
        self.n = derivation.metric.dimension

    def for_step(self, step: Step) -> tuple[str, str]:
        """(topic, code) for ``step``; the topic names the template macro that explains it."""
        sid = step.id
        exact = {
            "metric": self.metric, "metric_derivatives": self.metric_derivatives,
            "determinant": self.determinant, "inverse_metric": self.inverse_metric,
            "inverse_metric/check": self.inverse_check, "christoffel": self.christoffel_summary,
            "contracted_christoffel": self.contracted_check, "riemann": self.riemann_summary,
            "ricci": self.ricci_summary, "ricci/symmetry": self.ricci_symmetry,
            "ricci_by_trace_identity": self.ricci_route, "ricci/agreement": self.ricci_agreement,
            "scalar": self.scalar, "einstein": self.einstein_summary, "riemann_lowered": self.riemann_lowered,
            "riemann_lowered/pair_symmetry": self.pair_symmetry,
            "riemann_lowered/first_bianchi": self.first_bianchi,
            "numeric_verification": self.numeric_verification, "kretschmann": self.kretschmann,
            "weyl": self.weyl, "verdict/ricci_flat": self.ricci_flat,
            "verdict/einstein_space": self.einstein_space,
            "verdict/constant_curvature": self.constant_curvature,
            "verdict/conformally_flat": self.conformally_flat, "verdict/bianchi": self.bianchi,
            "field_equations": self.field_equations, "stress_energy": self.stress_energy_summary,
            "stress_energy_mixed": self.stress_energy_mixed, "stress_energy_up": self.stress_energy_up,
            "verdict/trace_free": self.trace_free, "frame": self.frame, "frame/check": self.frame_check,
            "frame_stress_energy": self.frame_stress_energy, "frame_ricci": self.frame_ricci,
            "frame_riemann": self.frame_riemann, "density_and_pressures": self.density_and_pressures,
            "verdict/perfect_fluid": self.perfect_fluid, "ansatz/equations": self.ansatz_equations,
            "ansatz/dependence": self.ansatz_dependence, "ansatz/solution": self.ansatz_solution,
            "ansatz/check": self.ansatz_check, "geodesic_equations": self.geodesic_equations,
        }
        component_kinds = ("component", "identity")
        prefixes = {"christoffel/": (self.christoffel_component, component_kinds),
                    "riemann/": (self.riemann_component, component_kinds),
                    "ricci/": (self.ricci_component, component_kinds),
                    "einstein/": (self.einstein_component, component_kinds),
                    "contracted_christoffel/": (self.contracted_component, component_kinds),
                    "stress_energy/": (self.stress_energy_component, ("component",)),
                    "energy_conditions/": (self.energy_condition, ("energy condition",)),
                    "ansatz/solve/": (self.ansatz_solve, ("ode solution",))}
        if step.kind == "claim":
            topic, body = self.claim(step)
        elif sid in exact:
            topic, body = exact[sid](step)
        else:
            prefix = next((p for p in prefixes if sid.startswith(p) and step.kind in prefixes[p][1]), None)
            if prefix is None:
                topic, body = "not_recomputed", self.not_recomputed(step)
            else:
                topic, body = prefixes[prefix][0](step)
        return topic, body

    # small pieces ---------------------------------------------------------
    def _id(self, step: Step) -> str:
        return _step_literal(step.id)

    def _indices(self, step: Step) -> str:
        return step.id.split("/", 1)[1]

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
        rows = ",\n".join("    [" + ", ".join(self.s.expr(m.matrix[i, j]) for j in range(self.n)) + "]"
                          for i in range(self.n))
        code = f"""# The metric matrix as read from the input (the line element turned into g_ij).
given = sp.Matrix([
{rows}
])
# The recorded components g_ij (those not listed are zero).
recorded = {self.s.table(step.result)}
check_table("metric", recorded, lambda i, j: given[index_names.index(i), index_names.index(j)], every_index(2))
metric.update(recorded)
{self._done(step)}"""
        return "metric", code

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
        code = f"""recorded = {self.s.expr(step.result)}
check({self._id(step)}, recorded, riemann_from_christoffel({a}, {b}, {c}, {d}))
riemann[{a}, {b}, {c}, {d}] = recorded
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
        tables = {"inverse_metric", "christoffel", "riemann", "riemann_lowered", "ricci", "einstein",
                  "stress_energy", "stress_energy_mixed", "stress_energy_up", "frame_stress_energy", "frame_ricci"}
        component = p.get("component", "")
        if quantity in scalars:
            return scalars[quantity] if quantity in results else None
        if quantity == "weyl":
            return f"weyl_from_lowered({self.s.names(component)})" if "weyl" in results else None
        if quantity in tables:
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
# In three dimensions the Weyl tensor vanishes identically; conformal flatness needs the Cotton tensor,
# which was not computed.
verdict({self._id(step)}, recorded_holds, {{}})"""
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
        return any(s.id == "frame" and not isinstance(s.result, Verdict) for s in self.d.steps)

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
            match = re.match(r"(T_\(\w+\)\(\w+\)|p_\(\w+\) - p_\(\w+\)) is not zero", step.result.evidence)
            if holds is False and match:
                label = _label_literal(match.group(1))
                lines += [f"# The recorded evidence names {label}: it must not vanish.",
                          f"if vanishes(residues[{label}]):",
                          f"    raise AssertionError(\"step verdict/perfect_fluid: the recorded evidence says \" + {label} + \" is not zero, but it vanishes\")"]
            lines.append(f"verdict({self._id(step)}, recorded_holds, residues)")
        return "verdict_perfect_fluid", "\n".join(lines)

    def energy_condition(self, step):
        name = step.id.split("/", 1)[1]
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
        table = ",\n".join(f"    {_label_literal(label)}: ({self.s.expr(row['value'])}, {row['holds']!r})"
                           for label, row in rows.items())
        lines = [self._holds(step),
                 "# Each inequality value >= 0: (the recorded value, the recorded answer).",
                 "recorded = {", table, "}",
                 f"check_inequality_values({self._id(step)}, \"{name}\", recorded)"]
        for label, row in rows.items():
            how, point = self._inequality_how(row)
            extra = "" if point is None else ", " + point
            lines.append(f"recheck_inequality({self._id(step)}, {_label_literal(label)}, "
                         f"recorded[{_label_literal(label)}][0], \"{how}\"{extra})")
        lines += ["if combined_answer([answer for _, answer in recorded.values()]) != recorded_holds:",
                  f"    raise AssertionError(\"step {step.id}: the answers of the inequalities do not give the recorded answer\")",
                  f"print(\"{step.id}: {_ANSWER[step.result.holds]}, as recorded\")"]
        return "energy_condition", "\n".join(lines)

    def _inequality_how(self, row) -> tuple[str, str | None]:
        """How a recorded answer to value >= 0 was reached, read from the evidence stepper wrote."""
        holds, evidence = row["holds"], str(row["evidence"])
        if holds is True:
            if evidence == "it is identically 0":
                return "zero", None
            if evidence.startswith("non-negative for all values allowed by the declared signs"):
                return "signs", None
            return "sampled", None
        if holds is False:
            if evidence.startswith("negative for all values allowed by the declared signs"):
                return "negative", None
            point = self._evidence_point(evidence)
            if point is not None:
                return "point", point
            return "search", None
        if "points sampled from" in evidence:
            return "sampled", None
        return "undecided", None

    def _evidence_point(self, evidence: str) -> str | None:
        match = re.match(r"at the point (.+?) of the region it equals", evidence)
        if not match:
            return None
        by_name = {s.name: s for _, s in self.s.symbols}
        by_name.update({s.name: s for _, s in self.s.others})
        entries = []
        for part in match.group(1).split(", "):
            name, _, number = part.partition(" = ")
            numeric = re.fullmatch(r"(-?[0-9]+)(?:/([0-9]+))?", number)
            if name not in by_name or not numeric:
                return None
            value = sympy.Rational(int(numeric.group(1)), int(numeric.group(2) or 1))
            entries.append(f"{self.s.expr(by_name[name])}: {self.s.expr(value)}")
        return "{" + ", ".join(entries) + "}"

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
        for name, text in step.params.get("rescalings", {}).items():
            coordinate_name = str(text).split(":", 1)[0]
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
geodesic_acceleration.update({{a: sp.sympify(component(recorded, a)) for a in index_names}})
{self._done(step)}"""
        return "geodesic_equations", code

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

    def not_recomputed(self, step):
        _step_literal(step.id)  # validates the id
        return ("# The notebook has no recomputation for this kind of step; it is shown, not checked.\n"
                f'print("{step.id}: not recomputed here")')


# --------------------------------------------------------------------------
# Assembly
# --------------------------------------------------------------------------

def _environment(templates: Sequence[Path] | None) -> jinja2.Environment:
    search = [str(Path(p)) for p in (templates or [])] + [str(PROJECT_TEMPLATES)]
    env = jinja2.Environment(loader=jinja2.FileSystemLoader(search), autoescape=False,
                             undefined=jinja2.StrictUndefined, keep_trailing_newline=False,
                             trim_blocks=True, lstrip_blocks=True)
    env.filters["text"] = _markdown_text
    env.filters["line"] = lambda value: " ".join(_markdown_text(value).split())
    env.filters["code"] = _inline_code
    env.filters["fenced"] = _fenced
    return env


def _markdown_text(value) -> str:
    """Free text shown as markdown: HTML-like characters are neutralised."""
    return str(value).replace("&", "&amp;").replace("<", "&lt;").replace(">", "&gt;")


def _inline_code(value) -> str:
    text = " ".join(str(value).split())
    fence = "`" * (max((len(run) for run in re.findall(r"`+", text)), default=0) + 1)
    pad = " " if text.startswith("`") or text.endswith("`") else ""
    return f"{fence}{pad}{text}{pad}{fence}"


def _fenced(value) -> str:
    text = str(value).strip("\n")
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
        lines += ["", "# Symbols the derivation introduced (integration constants, velocity components u_x = dx/dtau,",
                  "# constants used only by the field equations)."]
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
    if any(step.id == "field_equations" for step in steps):
        blocks.append(_MATTER_HELPERS)
    if any(step.id.startswith("ansatz/") for step in steps):
        blocks.append(_ANSATZ_HELPERS)
    if any(step.id == "geodesic_equations" for step in steps):
        blocks.append(_GEODESIC_HELPERS)
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
        if step.id == "geodesic_equations" and step.params.get("orbit"):
            text = env.get_template("notebook/orbit.md.j2").render(step=step, number=number, orbit=step.params["orbit"],
                                                                   dimension=metric.dimension)
            step_cells.append((step.id, text.strip("\n"), writer.orbit(step), "orbit"))

    context = {
        "metric": metric,
        "coordinates": list(metric.names),
        "parameters": [(p.name, dict(metric.assumptions).get(p.name, "")) for p in metric.parameters],
        "functions": [(f.func.__name__, [a.name for a in f.args]) for f in metric.functions],
        "abbreviations": [(name, sympy.latex(value)) for name, value in metric.abbreviations],
        "conventions": derivation.conventions,
        "arithmetic": derivation.arithmetic,
        "step_count": len(derivation.steps),
        "matter": any(step.id == "field_equations" for step in derivation.steps),
        "ansatz": any(step.id.startswith("ansatz/") for step in derivation.steps),
        "orbit": any(step.id == "geodesic_equations" and step.params.get("orbit") for step in derivation.steps),
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

