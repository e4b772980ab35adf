"""The derivation record: the product of the engine and the only thing exporters read.

A derivation is an immutable value: what was asked (:class:`MetricRecord`
with its optional requests), the conventions, and the ordered steps, each a
small frozen :class:`Step` (what kind of computation, the general formula,
the formula instantiated at its indices, the exact result, the earlier
steps it used).  The engine (``stepper.chain`` and the stages beyond it)
produces one; the audit produces a new one from it; exporters receive one,
either straight from a run or loaded from ``trace.json`` by
:func:`stepper.trace.load_trace`, and import nothing of the engine.

Nothing in this module computes curvature: only sympy values and plain data.
"""

from __future__ import annotations

import dataclasses
import enum
from dataclasses import dataclass, field
from typing import Any, Mapping, Union

import sympy


class StepKind(str, enum.Enum):
    """What kind of computation a step records (its value is the word written in ``trace.json``)."""

    INPUT = "input"
    DERIVATIVE = "derivative"
    DETERMINANT = "determinant"
    INVERSE = "inverse"
    CHECK = "check"
    COMPONENT = "component"
    SUMMARY = "summary"
    IDENTITY = "identity"
    CONTRACTION = "contraction"
    ROUTE = "route"
    LOWERING = "lowering"
    RAISING = "raising"
    INVARIANT = "invariant"
    TENSOR = "tensor"
    VERDICT = "verdict"
    NUMERIC_CHECK = "numeric check"
    FIELD_EQUATIONS = "field equations"
    FRAME = "frame"
    FRAME_COMPONENTS = "frame components"
    MATTER = "matter"
    ENERGY_CONDITION = "energy condition"
    ANSATZ = "ansatz"
    ODE_SOLUTION = "ode solution"
    GEODESIC = "geodesic"
    CLAIM = "claim"
    MODEL = "model"

    def __str__(self) -> str:
        return self.value


#: Assumption words -> keyword arguments of sympy.Symbol (the words a metric file uses, plus "complex").
ASSUMPTION_WORDS = {
    "positive": ("real", "positive"),
    "negative": ("real", "negative"),
    "nonnegative": ("real", "nonnegative"),
    "nonpositive": ("real", "nonpositive"),
    "nonzero": ("real", "nonzero"),
    "real": ("real",),
    "complex": (),
}

#: The words a free function's sign (or its first derivative's sign) may be declared with, as sympy assumptions.
FUNCTION_SIGN_WORDS = {
    "positive": ("real", "positive"),
    "nonnegative": ("real", "nonnegative"),
    "negative": ("real", "negative"),
    "nonpositive": ("real", "nonpositive"),
    "nonzero": ("real", "nonzero"),
}
#: The same words as relations, for sentences.
SIGN_RELATIONS = {"positive": "> 0", "nonnegative": ">= 0", "negative": "< 0", "nonpositive": "<= 0",
                  "nonzero": "!= 0"}


@dataclass(frozen=True)
class FunctionSign:
    """A declared sign of a free function (``along`` empty) or of its first derivative along the argument
    named ``along``: the metric file's ``[functions]`` table, ``m = { of = ["v"], sign = "nonnegative",
    derivative_sign = "nonnegative" }``, gives FunctionSign("m", "nonnegative") and
    FunctionSign("m", "nonnegative", "v")."""

    function: str
    sign: str
    along: str = ""

    def __post_init__(self) -> None:
        if self.sign not in FUNCTION_SIGN_WORDS:
            raise ValueError(f"unknown sign {self.sign!r} for the function {self.function}")

    def words(self) -> str:
        """``m >= 0`` or ``dm/dv >= 0``."""
        relation = SIGN_RELATIONS[self.sign]
        return f"d{self.function}/d{self.along} {relation}" if self.along else f"{self.function} {relation}"

    def as_data(self) -> dict:
        return {"function": self.function, "derivative": self.along or None, "sign": self.sign}

    @classmethod
    def from_data(cls, data: Mapping[str, Any]) -> "FunctionSign":
        return cls(str(data["function"]), str(data["sign"]), str(data.get("derivative") or ""))


#: The one vocabulary for a decision, everywhere stepper writes one (terminal, PDF, notebook).
HOLDS_WORDS: Mapping[bool | None, str] = {True: "holds", False: "does not hold", None: "undecided"}
#: The same for an energy condition, where "violated" is the word of the trade.
CONDITION_WORDS: Mapping[bool | None, str] = {True: "holds", False: "violated", None: "undecided"}


@dataclass(frozen=True)
class Verdict:
    """A yes/no statement with the evidence for it.

    ``holds`` is True or False when decided, None when the algebra could not
    decide (the evidence then says what was seen numerically).
    """

    statement: str
    holds: bool | None
    evidence: str

    def _repr_latex_(self) -> str:  # Jupyter (stepper.display)
        from .display import verdict_latex
        return verdict_latex(self)


Result = Union[sympy.Expr, Mapping[str, Any], Verdict, None]


class Method(str, enum.Enum):
    """How an inequality value >= 0 was decided."""

    IDENTICALLY_ZERO = "identically zero"      # holds: the value is identically 0
    DECLARED_SIGNS = "declared signs"          # holds or fails for every value the declared signs allow
    EXACT_POINT = "exact point"                # fails: negative at an exact point of the sampling region
    SAMPLED = "sampled"                        # undecided: >= 0 at every sampled exact point (evidence)
    FREE_FUNCTIONS = "free functions"          # undecided: the sign depends on free functions
    NO_RANGE = "no range"                      # undecided: the region gives no range for some symbols
    NO_POINTS = "no points"                    # undecided: no point of the region lies where the frame exists

    def __str__(self) -> str:
        return self.value


@dataclass(frozen=True)
class Decision:
    """How ``value >= 0`` was decided, as data: the PDF, the notebook and the terminal make their words
    from these fields (:meth:`sentence` for plain text) and never read a sentence back.

    ``point`` and ``value_there`` (exact) for EXACT_POINT; ``points``, ``region`` and ``digits`` for
    SAMPLED; ``missing`` for NO_RANGE; ``free_functions`` when free functions were taken as real.
    """

    method: Method
    holds: bool | None
    point: Mapping[str, sympy.Expr] = field(default_factory=dict)
    value_there: sympy.Expr | None = None
    points: int = 0
    region: Mapping[str, tuple[sympy.Expr, sympy.Expr]] = field(default_factory=dict)
    digits: int = 0
    missing: tuple[str, ...] = ()
    free_functions: bool = False
    #: The declared signs of free functions (and first derivatives) that decided it, when the signs of the
    #: symbols alone did not.
    function_signs: tuple[FunctionSign, ...] = ()

    #: Longest exact value (in characters of sympy's string form) a sentence quotes in full.
    EXACT_TEXT_LIMIT = 60

    def __post_init__(self) -> None:
        object.__setattr__(self, "method", Method(self.method))

    def as_data(self) -> dict:
        data: dict = {"method": self.method.value, "holds": self.holds}
        if self.method is Method.EXACT_POINT:
            data["point"] = dict(self.point)
            data["value_there"] = self.value_there
        if self.method is Method.SAMPLED:
            data.update(points=self.points, digits=self.digits,
                        region={name: [lo, hi] for name, (lo, hi) in self.region.items()})
        if self.method is Method.NO_RANGE:
            data["missing"] = list(self.missing)
        if self.free_functions:
            data["free_functions"] = True
        if self.function_signs:
            data["function_signs"] = [s.as_data() for s in self.function_signs]
        return data

    @classmethod
    def from_data(cls, data: Mapping[str, Any]) -> "Decision":
        return cls(method=Method(data["method"]), holds=data["holds"], point=dict(data.get("point", {})),
                   value_there=data.get("value_there"), points=int(data.get("points", 0)),
                   region={name: tuple(bounds) for name, bounds in data.get("region", {}).items()},
                   digits=int(data.get("digits", 0)), missing=tuple(data.get("missing", ())),
                   free_functions=bool(data.get("free_functions", False)),
                   function_signs=tuple(FunctionSign.from_data(s) for s in data.get("function_signs", ())))

    def value_there_is_short(self) -> bool:
        return self.value_there is not None and len(sympy.sstr(self.value_there)) <= self.EXACT_TEXT_LIMIT

    def sentence(self, value: sympy.Expr) -> str:
        """The decision in plain words (``value`` is the quantity decided)."""
        functions = ", free functions and their derivatives taken as real" if self.free_functions else ""
        if self.function_signs:
            functions = ", with " + ", ".join(s.words() for s in self.function_signs) + " as declared"
        m = self.method
        if m is Method.IDENTICALLY_ZERO:
            return "it is identically 0"
        if m is Method.DECLARED_SIGNS and self.holds:
            return f"non-negative for all values allowed by the declared signs (sympy's assumptions{functions})"
        if m is Method.DECLARED_SIGNS:
            return (f"negative for all values allowed by the declared signs (sympy's assumptions{functions}): "
                    f"it equals {value}")
        if m is Method.EXACT_POINT:
            where = ", ".join(f"{name} = {v}" for name, v in self.point.items())
            if self.value_there_is_short():
                return f"at the point {where} of the region it equals {self.value_there} < 0 (exact value)"
            return (f"at the point {where} of the region it equals {sympy.N(self.value_there, 6)} < 0 "
                    "(to 6 digits; its exact value is negative)")
        if m is Method.FREE_FUNCTIONS:
            return ("it depends on free functions, and its sign is not fixed by the declared signs; "
                    f"its value is {value}")
        if m is Method.NO_RANGE:
            return ("the declared signs do not settle its sign, and [matter.region] gives no range for "
                    f"{', '.join(self.missing)} to sample it (with the frame's squared norms) at")
        if m is Method.NO_POINTS:
            return "no point of the region lies where the frame exists (every N > 0)"
        ranges = ", ".join(f"{name} in [{lo}, {hi}]" for name, (lo, hi) in self.region.items())
        return (f"the declared signs do not settle its sign; it is >= 0 at all {self.points} exact points sampled "
                f"from {ranges} where the frame exists (evaluated to {self.digits} digits): evidence, not proof")


@dataclass(frozen=True)
class Simplification:
    """One rewrite of a raw result: before, after, and what was applied.

    ``before`` is None when the raw expression was too long to be worth
    keeping; ``before_size`` then still says how long it was.
    """

    rewrite: str
    before: sympy.Expr | None
    after: sympy.Expr
    before_size: int = 0


#: The parts of a derivation, in the order they run; each step belongs to one.
STAGES = ("curvature", "matter", "energy conditions", "model", "ansatz", "geodesics", "audit")


@dataclass(frozen=True)
class Step:
    """One recorded equation of the derivation.

    ``quantity`` names the registry quantity (stepper.quantities) or verdict the step is about, and
    ``component`` which part of it: a component key such as "r,t,t", an index, an energy condition's name,
    a claim's component.  ``stage`` is the part of the derivation that recorded it (one of STAGES).
    Exporters read these fields; they never take a step's meaning apart from its id.
    """

    id: str
    kind: StepKind
    annotation: str
    formula: str
    uses: tuple[str, ...]
    result: Result
    params: Mapping[str, Any] = field(default_factory=dict)
    substituted: str = ""
    simplifications: tuple[Simplification, ...] = ()
    quantity: str = ""
    component: str = ""
    stage: str = "curvature"

    def __post_init__(self) -> None:
        object.__setattr__(self, "kind", StepKind(self.kind))
        if self.stage not in STAGES:
            raise ValueError(f"step {self.id}: unknown stage {self.stage!r}")
        object.__setattr__(self, "uses", tuple(self.uses))
        object.__setattr__(self, "simplifications", tuple(self.simplifications))

    def _repr_latex_(self) -> str:  # Jupyter (stepper.display)
        from .display import step_latex
        return step_latex(self)


# ---------------------------------------------------------------------------
# What was asked
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class MatterRequest:
    """Ask for the stress-energy tensor the metric requires, G_ij + Lambda g_ij = kappa T_ij.

    ``units`` is "geometric" (G = c = 1, kappa = 8 pi) or "physical"
    (kappa = 8 pi G / c^4 with ``newton`` and ``light`` the symbols G and c).
    ``time`` is the coordinate whose level sets the frame's observers are
    normal to.  ``region`` bounds the symbols for sampling the energy
    conditions the algebra cannot decide: (symbol, low, high), exact.
    """

    time: sympy.Symbol
    units: str = "geometric"
    cosmological_constant: sympy.Expr = sympy.Integer(0)
    newton: sympy.Symbol | None = None
    light: sympy.Symbol | None = None
    region: tuple[tuple[sympy.Symbol, sympy.Expr, sympy.Expr], ...] = ()
    #: The matter declared with ``[matter.model]`` (its stress-energy, field equations and conservation law).
    model: "MatterModel | None" = None

    @property
    def kappa(self) -> sympy.Expr:
        """The coupling constant kappa = 8 pi G / c^4 (8 pi in geometric units)."""
        if self.units == "physical":
            return 8 * sympy.pi * self.newton / self.light**4
        return 8 * sympy.pi


MODEL_KINDS = ("perfect fluid", "dust", "scalar field", "electromagnetic field")


@dataclass(frozen=True)
class MatterModel:
    """The matter a metric file declares with ``[matter.model]`` (see stepper/models.py).

    ``kind`` is one of MODEL_KINDS.  A perfect fluid has ``density`` and ``pressure`` (expressions, usually
    free functions); dust has ``density`` only.  ``velocity`` holds the fluid's four-velocity u^a (upper
    indices, one per coordinate); empty means the observer at rest along the time coordinate,
    u^a = delta^a_t / sqrt(-g_tt).  A scalar field has ``field`` (phi) and ``potential`` V (an expression
    that may hold phi).  An electromagnetic field has ``vector_potential``, A_a with lower indices.
    """

    kind: str
    density: sympy.Expr | None = None
    pressure: sympy.Expr | None = None
    velocity: tuple[sympy.Expr, ...] = ()
    field: sympy.Expr | None = None
    potential: sympy.Expr = sympy.Integer(0)
    vector_potential: tuple[sympy.Expr, ...] = ()


@dataclass(frozen=True)
class AnsatzRequest:
    """Solve G_ij + Lambda g_ij = 0 for the free functions ``unknowns`` of the metric."""

    unknowns: tuple[sympy.Expr, ...]
    cosmological_constant: sympy.Expr = sympy.Integer(0)


@dataclass(frozen=True)
class OrbitRequest:
    """One geodesic to integrate numerically in the notebook.

    ``values`` gives every parameter a number, ``start`` every coordinate,
    ``velocity`` dx/dtau for every coordinate except ``time`` (whose rate
    follows from g_ab u^a u^b = -1 for "timelike", 0 for "null"), and
    ``span`` the proper time or affine parameter to integrate over.
    """

    time: sympy.Symbol
    kind: str
    values: tuple[tuple[sympy.Symbol, sympy.Expr], ...]
    start: tuple[tuple[sympy.Symbol, sympy.Expr], ...]
    velocity: tuple[tuple[sympy.Symbol, sympy.Expr], ...]
    span: sympy.Expr


#: Energy conditions a plot may shade where they fail (the names of the energy-condition steps' components).
PLOT_SHADES = ("null", "weak", "strong", "dominant")


@dataclass(frozen=True)
class PlotRequest:
    """One plot for the report and the notebook (the metric file's ``[[plot]]``).

    ``quantities`` are registry names of scalar results (``scalar``, ``kretschmann``, ``energy_density``,
    ``pressure`` for every principal pressure, ...), drawn along the coordinate ``along`` from ``low`` to
    ``high`` with every other symbol fixed by ``values`` (exact numbers); ``shade`` names an energy
    condition whose failing stretch is shaded ("" for none).
    """

    quantities: tuple[str, ...]
    along: sympy.Symbol
    low: sympy.Expr
    high: sympy.Expr
    values: tuple[tuple[sympy.Symbol, sympy.Expr], ...] = ()
    shade: str = ""


@dataclass(frozen=True)
class FrameRequest:
    """A frame of the user's own (the metric file's ``[frame]``): an orthonormal frame or a null tetrad.

    ``kind`` is "orthonormal" (vectors e0 ... e(n-1), e0 timelike in Lorentzian signature) or "null"
    (vectors l, n, m of a null tetrad with l.n = -1, m.mbar = 1, all others 0; mbar is the complex
    conjugate of m, whose components may hold sympy.I; in more than four dimensions the remaining
    unit spacelike vectors follow as e4, e5, ...).  ``vectors`` are (name, components) in the metric's
    coordinates, with upper indices when ``index`` is "up" and lower indices when it is "down", exactly
    as the file wrote them; the engine raises covectors as a recorded step.
    """

    kind: str
    vectors: tuple[tuple[str, tuple[sympy.Expr, ...]], ...]
    index: str = "up"


@dataclass(frozen=True)
class MetricRecord:
    """An n-dimensional metric g_ij in coordinates x^i, with what it was built from and what was asked."""

    coordinates: tuple[sympy.Symbol, ...]
    matrix: sympy.ImmutableMatrix
    title: str = "Untitled metric"
    parameters: tuple[sympy.Symbol, ...] = ()
    functions: tuple[sympy.Expr, ...] = ()
    abbreviations: tuple[tuple[str, sympy.Expr], ...] = ()
    line_element: str | None = None
    notes: str = ""
    assumptions: tuple[tuple[str, str], ...] = field(default=())
    matter: MatterRequest | None = None
    ansatz: AnsatzRequest | None = None
    orbit: OrbitRequest | None = None
    #: The line element as read, in the coordinates' differentials (symbols named d<coordinate>),
    #: abbreviations written out; None when the metric was given as a matrix.
    line_element_expression: sympy.Expr | None = None
    #: Declared signs of free functions and of their first derivatives, in the order of the metric file.
    function_signs: tuple[FunctionSign, ...] = ()
    #: The plots asked for with ``[[plot]]``, in the order of the metric file.
    plots: tuple[PlotRequest, ...] = ()
    #: The frame or null tetrad given with ``[frame]``; None when stepper builds its own.
    frame: FrameRequest | None = None

    @property
    def extra_symbols(self) -> tuple[sympy.Symbol, ...]:
        """Symbols the requests bring in beyond the matrix (Lambda, G, c)."""
        found: set = set()
        for request in (self.matter, self.ansatz):
            if request is not None:
                found |= request.cosmological_constant.free_symbols
        if self.matter is not None and self.matter.units == "physical":
            found |= {self.matter.newton, self.matter.light}
        return tuple(sorted(found - set(self.coordinates), key=lambda s: s.name))

    @property
    def dimension(self) -> int:
        return len(self.coordinates)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.coordinates)


# ---------------------------------------------------------------------------
# The derivation
# ---------------------------------------------------------------------------

@dataclass(frozen=True)
class Derivation:
    """What a run produced: the metric, the conventions (plain and typeset), the steps in the order they
    were computed, and the final results keyed by quantity and by coordinate-named indices.

    Immutable: the audit makes a new one with :meth:`with_steps`.  ``seconds`` is how long the run took;
    it is not part of the record (the trace never holds timings).
    """

    metric: MetricRecord
    steps: tuple[Step, ...]
    results: Mapping[str, Any]
    arithmetic: str
    arithmetic_description: str = ""
    conventions: Mapping[str, str] = field(default_factory=dict)
    conventions_latex: Mapping[str, str] = field(default_factory=dict)
    #: The conventions as data: index positions contracted, the sign of the Riemann tensor, the metric's
    #: signature when the declared signs fix it (None otherwise), which orderings each table lists.
    convention_data: Mapping[str, Any] = field(default_factory=dict)
    seconds: float = field(default=0.0, compare=False)
    #: None for a whole derivation.  A run stopped by its time limit or by Ctrl-C keeps the stages it
    #: finished: {"reason": "time limit" or "interrupted", "during": the stage it was in, "finished": the
    #: stages before it, in order}; steps and results then hold exactly those stages.
    stopped: Mapping[str, Any] | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "steps", tuple(self.steps))

    def step(self, step_id: str) -> Step:
        for s in self.steps:
            if s.id == step_id:
                return s
        raise KeyError(step_id)

    def with_steps(self, steps: tuple[Step, ...], results: Mapping[str, Any]) -> "Derivation":
        """A new derivation with ``steps`` appended and ``results`` merged into the results."""
        return dataclasses.replace(self, steps=self.steps + tuple(steps), results={**self.results, **results})

    def quantity(self, name: str):
        """The recorded components of the quantity ``name`` ("ricci", "christoffel", "scalar", ...): a
        mapping from component keys ("theta,theta") to expressions, typeset in Jupyter (stepper.display)."""
        from .display import Components
        return Components(self, name)

    def verdict(self, name):
        """The verdict ``name`` ("ricci_flat", an energy condition such as "null", or a claim's number after
        an audit) with the step that decided it, typeset in Jupyter (stepper.display)."""
        from .display import find_verdict
        return find_verdict(self, name)

    def show_step(self, step_id: str):
        """The step ``step_id`` typeset with this derivation's abbreviations and notation (stepper.display)."""
        from .display import StepView
        return StepView(self, self.step(step_id))

    def _repr_latex_(self) -> str:  # Jupyter (stepper.display)
        from .display import derivation_latex
        return derivation_latex(self)


def as_expression(value) -> sympy.Expr:
    """A sympy expression from a sympy object or a Python number; text is refused."""
    if isinstance(value, sympy.Basic):
        return value
    if isinstance(value, int):
        return sympy.Integer(value)
    raise TypeError(f"expected a sympy expression, got {type(value).__name__}")
