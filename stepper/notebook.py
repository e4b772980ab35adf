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

    def __init__(self, identifiers: dict[str, str], functions: dict[str, str]):
        super().__init__({"order": "lex"})
        self._identifiers = identifiers
        self._functions = functions

    def _print_Symbol(self, expr):
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
        self.coordinate_names = [c.name for c in metric.coordinates]
        self.words = dict(metric.assumptions)
        self._printer = _SourcePrinter(self.identifiers, self.functions)
        self._own = set(self.identifiers.values()) | set(self.functions.values())
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

    def symbol_definition(self, variable: str, symbol: sympy.Symbol) -> str:
        word = self.words.get(symbol.name)
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


_NUMBER = re.compile(r"-?[0-9]+(\.[0-9]+)?(e[-+]?[0-9]+)?")


def _step_literal(step_id: str) -> str:
    if not _STEP_ID.fullmatch(step_id):
        raise NotebookError(f"step id {step_id!r} has characters the notebook does not write into code")
    return f'"{step_id}"'


# --------------------------------------------------------------------------
# The setup cell: helpers a referee reads once
# --------------------------------------------------------------------------

_HELPERS = '''
def component(table, *indices):
    """A recorded tensor component; components that were not recorded are zero."""
    return table.get(indices, sp.S.Zero)


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

def polynomial_quotient(expr):
    """expr as numerator / denominator, two polynomials in fresh symbols, if it is a rational function.

    Each sin(x), cos(x) (sinh(x), cosh(x)) of a symbol x becomes a fresh symbol
    s, c, and each free function and each of its derivatives a fresh symbol
    too.  Returns (numerator, denominator, relations) with one relation
    c**2 + s**2 - 1 (c**2 - s**2 - 1 for the hyperbolic pair) per pair, all
    three as elements of one polynomial ring with the cosines first in lex
    order; or None when expr holds anything else (exp, sqrt, log, ...).
    """
    rewrites = {sp.tan: lambda u: sp.sin(u) / sp.cos(u), sp.cot: lambda u: sp.cos(u) / sp.sin(u),
                sp.sec: lambda u: 1 / sp.cos(u), sp.csc: lambda u: 1 / sp.sin(u),
                sp.tanh: lambda u: sp.sinh(u) / sp.cosh(u), sp.coth: lambda u: sp.cosh(u) / sp.sinh(u)}
    for head, rule in rewrites.items():
        if expr.has(head):
            expr = expr.replace(head, rule)
    fresh, pairs = {}, []
    for cosine, sine, sign in ((sp.cos, sp.sin, 1), (sp.cosh, sp.sinh, -1)):
        for x in sorted({f.args[0] for f in expr.atoms(cosine, sine)}, key=sp.default_sort_key):
            if not x.is_Symbol:
                return None
            c, s = sp.Dummy("c"), sp.Dummy("s")
            fresh[cosine(x)], fresh[sine(x)] = c, s
            pairs.append((c, s, sign))
    for f in sorted(expr.atoms(sp.Derivative, sp.core.function.AppliedUndef), key=sp.default_sort_key):
        fresh[f] = sp.Dummy("f")
    plain = expr.xreplace(fresh)
    cosines, sines = [c for c, _, _ in pairs], [s for _, s, _ in pairs]
    generators = cosines + sines + sorted(plain.free_symbols - set(cosines) - set(sines), key=sp.default_sort_key)
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
    relations = [variable[c]**2 + sign * variable[s]**2 - 1 for c, s, sign in pairs]
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
    return sp.simplify(expr) == 0


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
        }
        prefixes = {"christoffel/": self.christoffel_component, "riemann/": self.riemann_component,
                    "ricci/": self.ricci_component, "einstein/": self.einstein_component,
                    "contracted_christoffel/": self.contracted_component}
        if step.kind == "claim":
            topic, body = self.claim(step)
        elif sid in exact:
            topic, body = exact[sid](step)
        else:
            prefix = next((p for p in prefixes if sid.startswith(p) and step.kind in ("component", "identity")), None)
            if prefix is None:
                topic, body = "not_recomputed", self.not_recomputed(step)
            else:
                topic, body = prefixes[prefix](step)
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
        scalars = {"determinant": "metric_determinant", "scalar": "scalar_curvature",
                   "kretschmann": "kretschmann_scalar"}
        quantity = p["quantity"]
        if quantity in scalars:
            derived = scalars[quantity]
        elif quantity == "weyl":
            derived = f"weyl_from_lowered({self.s.names(p['component'])})"
        else:
            tables = {"inverse_metric", "christoffel", "riemann", "riemann_lowered", "ricci", "einstein"}
            if quantity not in tables:
                raise NotebookError(f"claim {number}: unknown quantity {quantity!r}")
            derived = f"component({quantity}, {self.s.names(p['component'])})"
        outcome = p["outcome"]
        if quantity not in self.d.results:
            code = (f"# Claim {number} is about a quantity this derivation did not compute; nothing to check.\n"
                    f'print("claim {number}: {outcome}, not checked here")')
            return "claim", code
        if "claimed" not in p:
            code = (f"# Claim {number} could not be read (see the text above); there is nothing to check.\n"
                    f'print("claim {number}: unreadable, not checked")')
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


def _setup_code(source: _Source) -> str:
    lines = ["# Plain sympy only: this notebook was written by stepper but does not import it.",
             "import itertools", "", "import sympy as sp"]
    if source.sympy_names:
        lines.append(f"from sympy import {', '.join(sorted(source.sympy_names))}")
    lines += ["", "# Coordinates and parameters with their declared assumptions."]
    lines += [source.symbol_definition(variable, symbol) for variable, symbol in source.symbols]
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
    return "\n".join(lines) + _HELPERS


def _new_cell(kind: str, source: str, number: int, step_id: str | None):
    maker = nbformat.v4.new_code_cell if kind == "code" else nbformat.v4.new_markdown_cell
    cell = maker(source=source)
    cell["id"] = f"cell-{number:04d}"
    cell["metadata"] = {"stepper": {"step": step_id}} if step_id else {}
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
        step_cells.append((step.id, text.strip("\n"), code))

    context = {
        "metric": metric,
        "coordinates": list(metric.names),
        "parameters": [(p.name, dict(metric.assumptions).get(p.name, "")) for p in metric.parameters],
        "functions": [(f.func.__name__, [a.name for a in f.args]) for f in metric.functions],
        "abbreviations": [(name, sympy.latex(value)) for name, value in metric.abbreviations],
        "conventions": derivation.conventions,
        "arithmetic": derivation.arithmetic,
        "step_count": len(derivation.steps),
    }
    cells = []

    def add(kind, text, step_id=None):
        cells.append(_new_cell(kind, text, len(cells) + 1, step_id))

    add("markdown", env.get_template("notebook/title.md.j2").render(**context).strip("\n"))
    add("markdown", env.get_template("notebook/setup.md.j2").render(**context).strip("\n"))
    add("code", _setup_code(source))
    for step_id, text, code in step_cells:
        add("markdown", text, step_id)
        add("code", code, step_id)
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

