"""Plots for the report and the notebook, made from the trace alone.

What is drawn: the metric file's ``[[plot]]`` requests (:class:`~stepper.record.PlotRequest`), or, when it
has none and asks for ``[matter]`` with a ``[matter.region]``, one default plot: the energy density and the
principal pressures along the first coordinate (not the time) that the region gives a range for, every other
symbol of the region at the midpoint of its range, shaded where the first of the null, weak, strong and
dominant energy conditions that fails on that stretch fails.

How: the recorded exact results (``Derivation.results``) get the exact values put in, then are evaluated
with mpmath to ``DIGITS`` digits at ``INTERVALS + 1`` evenly spaced exact points of the range (a fixed grid,
so the same trace gives the same numbers), and drawn with matplotlib's object interface (a
``matplotlib.figure.Figure`` on a PDF canvas; no pyplot, no global backend) as a vector PDF whose metadata
holds no date, so the same trace gives the same bytes.  Nothing here imports the engine; every caption is
LaTeX made from the data.

The orbit (:func:`orbit_plot`, last of the plots): when the metric file has ``[orbit]``, the recorded geodesic
equations (the geodesic step's result, the orbit's values put in) are integrated with the classical Runge-Kutta
scheme in ``ORBIT_DIGITS``-digit mpmath arithmetic, ``ORBIT_STEPS`` equal steps over the span, from the start with
u^time the positive root of g_ab u^a u^b = -1 (timelike) or 0 (null); each expression is compiled once into a
tree of mpmath's exactly rounded operations, so the numbers, and the figure's bytes, are the same on every
machine.  Drawn in the plane (x = r cos phi, y = r sin phi) when the coordinates have a radius and an azimuth and
the orbit stays in the equator, otherwise as the second space coordinate against the first.
"""

from __future__ import annotations

import io
import math
from dataclasses import dataclass
from typing import Any, Mapping

import mpmath
import sympy
from mpmath import libmp

from .latex import ExpressionWriter, component_symbol
from .quantities import QUANTITIES
from .record import PLOT_SHADES, Derivation, PlotRequest, as_expression

#: The grid: INTERVALS + 1 evenly spaced points from the low end to the high end, both included.
INTERVALS = 200
#: Digits each point is evaluated to (then rounded to a double for drawing).
DIGITS = 30
#: An inequality value fails at a point when it is below -SHADE_TOLERANCE times its largest size on the grid
#: (so that a value that is exactly 0 somewhere, evaluated as -1e-31, does not count as failing).
SHADE_TOLERANCE = 1e-12
#: Points of each curve the notebook compares its own values with.
NOTEBOOK_CHECK_EVERY = 25

#: The inequalities of each energy condition, typeset (rho and p_(k) are the frame's).
CONDITION_TEX = {
    "null": r"\rho + p_{(k)} \ge 0",
    "weak": r"\rho \ge 0,\ \rho + p_{(k)} \ge 0",
    "strong": r"\rho + p_{(k)} \ge 0,\ (n-3)\rho + \sum_k p_{(k)} \ge 0",
    "dominant": r"\rho \ge |p_{(k)}|",
}

#: Figure size in inches (fits the report's text width) and the matplotlib settings every figure is drawn
#: with, over matplotlib's defaults (a user's matplotlibrc does not reach the figures).
FIGURE_SIZE = (6.2, 3.5)
STYLE = {
    "font.family": "serif", "font.serif": ["cmr10"], "mathtext.fontset": "cm", "axes.formatter.use_mathtext": True,
    "font.size": 10, "axes.titlesize": 10, "legend.fontsize": 9, "lines.linewidth": 1.4,
    "pdf.fonttype": 3, "pdf.compression": 6, "axes.unicode_minus": True,
}
LINE_STYLES = ("-", "--", ":", "-.")
#: Line widths, widest first, so that a curve drawn over an equal one leaves it visible.
LINE_WIDTHS = (2.6, 1.7, 1.5, 1.2)
SHADE_COLOUR = "#f3d3cf"
#: A plot whose values are all positive and span more than this ratio is drawn on a logarithmic scale.
LOG_RATIO = 100.0


@dataclass(frozen=True)
class Curve:
    """One drawn curve: its LaTeX symbol (math mode), the recorded expression, that expression with the
    plot's values put in, and its value at each point of the grid (NaN where it is not a finite real)."""

    tex: str
    recorded: sympy.Expr
    concrete: sympy.Expr
    values: tuple[float, ...]


@dataclass(frozen=True)
class Plot:
    """One plot, ready to draw and to caption; ``problem`` says why it is not drawn ("" when it is)."""

    number: int
    quantities: tuple[str, ...]
    along: sympy.Symbol
    low: sympy.Expr
    high: sympy.Expr
    values: tuple[tuple[sympy.Symbol, sympy.Expr], ...]
    default: bool = False
    problem: str = ""
    points: tuple[sympy.Expr, ...] = ()
    x: tuple[float, ...] = ()
    curves: tuple[Curve, ...] = ()
    #: The energy condition shaded where it fails ("" for none), the inequality values it was read from
    #: (values put in), and whether it fails at each point.
    shade: str = ""
    shade_values: tuple[sympy.Expr, ...] = ()
    failing: tuple[bool, ...] = ()
    #: The shaded condition's inequality values as recorded (before the values are put in).
    shade_recorded: tuple[sympy.Expr, ...] = ()
    #: A requested condition that could not be shaded, and why.
    shade_problem: str = ""

    @property
    def file_name(self) -> str:
        return f"plot-{self.number}-{'-'.join(self.quantities).replace('_', '-')}.pdf"

    @property
    def drawn(self) -> bool:
        return not self.problem

    @property
    def logarithmic(self) -> bool:
        """Whether the vertical scale is logarithmic: every value positive, spanning more than LOG_RATIO."""
        finite = [v for c in self.curves for v in c.values if math.isfinite(v)]
        return bool(finite) and min(finite) > 0 and max(finite) > LOG_RATIO * min(finite)


def plots(derivation: Derivation) -> list[Plot]:
    """Every plot of a derivation, requested or default, with its data (the last derivation's are kept, so
    that the report, the PDF, the figure files and the notebook of one run compute them once)."""
    if _last and _last[0] is derivation:
        return list(_last[1])
    made = [_with_data(derivation, number, request, default)
            for number, (request, default) in enumerate(_requests(derivation), start=1)]
    _last[:] = [derivation, tuple(made)]
    return made


_last: list = []


def plot_files(derivation: Derivation) -> dict[str, bytes]:
    """The PDF file of every plot that can be drawn (the orbit's last), by file name."""
    files = {p.file_name: figure_pdf(p) for p in plots(derivation) if p.drawn}
    orbit = orbit_plot(derivation)
    if orbit is not None and orbit.drawn:
        files[orbit.file_name] = orbit_pdf(orbit)
    return files


def _requests(derivation: Derivation) -> list[tuple[PlotRequest, bool]]:
    metric = derivation.metric
    if metric.plots:
        return [(r, False) for r in metric.plots]
    matter, results = metric.matter, derivation.results
    if matter is None or not matter.region or metric.functions or "energy_density" not in results:
        return []
    if not results.get("frame_diagonal", True):
        return []
    if all(as_expression(v) == 0 for v in [results["energy_density"], *results.get("pressures", {}).values()]):
        return []  # vacuum: nothing to see
    ranges = {symbol: (low, high) for symbol, low, high in matter.region}
    along = next((c for c in metric.coordinates if c != matter.time and c in ranges), None)
    if along is None or not ranges[along][0] < ranges[along][1]:
        return []
    values = tuple((symbol, (low + high) / 2) for symbol, (low, high) in ranges.items() if symbol != along)
    request = PlotRequest(quantities=("energy_density", "pressure"), along=along, low=ranges[along][0],
                          high=ranges[along][1], values=values, shade="")
    return [(request, True)]


def _writer(derivation: Derivation) -> ExpressionWriter:
    return ExpressionWriter((), derivation.metric.coordinates)


def _with_data(derivation: Derivation, number: int, request: PlotRequest, default: bool) -> Plot:
    plot = Plot(number=number, quantities=tuple(request.quantities), along=request.along, low=request.low,
                high=request.high, values=tuple(request.values), default=default)
    results = derivation.results
    writer = _writer(derivation)
    recorded: list[tuple[str, sympy.Expr]] = []
    for quantity in request.quantities:
        entry = QUANTITIES.get(quantity)
        if entry is None or (entry.rank != 0 and quantity != "pressure"):
            return _refused(plot, f"stepper cannot plot {quantity}")
        if entry.requires == "matter" and not results.get("frame_diagonal", True):
            return _refused(plot, "the stress-energy tensor is not diagonal in the frame, so the energy density and "
                                  "principal pressures are not read off")
        if entry.key not in results:
            return _refused(plot, f"the derivation holds no {entry.words}" +
                            (" (the invariants were skipped)" if entry.requires == "invariants" else ""))
        if quantity == "pressure":
            recorded += [(component_symbol("pressure", [k], writer), v) for k, v in results[entry.key].items()]
        else:
            recorded.append((component_symbol(quantity, [], writer), results[entry.key]))
    substitutions = dict(request.values)
    points = grid(request.low, request.high)
    curves = []
    for tex, expression in recorded:
        concrete = as_expression(expression).subs(substitutions)
        loose = sorted(s.name for s in concrete.free_symbols if s != request.along)
        if loose or concrete.atoms(sympy.core.function.AppliedUndef):
            what = ", ".join(loose) or "a free function"
            return _refused(plot, f"its value still depends on {what}, which the plot gives no value")
        curves.append(Curve(tex, expression, concrete, tuple(evaluate(concrete, request.along, p) for p in points)))
    plot = _replace(plot, points=tuple(points), x=tuple(float(sympy.N(p, DIGITS)) for p in points),
                    curves=tuple(curves))
    return _shaded(derivation, plot, request.shade if not default else "auto")


def _refused(plot: Plot, reason: str) -> Plot:
    return _replace(plot, problem=reason)


def _replace(plot: Plot, **changes) -> Plot:
    import dataclasses
    return dataclasses.replace(plot, **changes)


def _shaded(derivation: Derivation, plot: Plot, shade: str) -> Plot:
    """The plot with the stretch where an energy condition fails: the requested one, or for "auto" the first
    of PLOT_SHADES that fails somewhere on the grid (none when none does)."""
    if not shade:
        return plot
    table = derivation.results.get("energy_conditions", {})
    candidates = PLOT_SHADES if shade == "auto" else (shade,)
    for name in candidates:
        rows = table.get(name, {}).get("inequalities", {})
        if not rows:
            if shade != "auto":
                return _replace(plot, shade_problem=f"the {name} energy condition was not read off as inequalities "
                                                    "(see its step)")
            continue
        substitutions = dict(plot.values)
        concrete = [as_expression(row["value"]).subs(substitutions) for row in rows.values()]
        if any(s != plot.along for e in concrete for s in e.free_symbols):
            if shade != "auto":
                return _replace(plot, shade_problem=f"the inequalities of the {name} energy condition depend on "
                                                    "symbols the plot gives no value")
            continue
        failing = failing_points(concrete, plot.along, plot.points)
        if shade == "auto" and not any(failing):
            continue
        return _replace(plot, shade=name, shade_values=tuple(concrete), failing=tuple(failing),
                        shade_recorded=tuple(as_expression(row["value"]) for row in rows.values()))
    return plot


def failing_points(values: list[sympy.Expr], along: sympy.Symbol, points) -> list[bool]:
    """At each point, whether one of ``values`` (an energy condition's inequalities, value >= 0) is negative
    beyond SHADE_TOLERANCE times its largest size on the grid."""
    failing = [False] * len(points)
    for value in values:
        numbers = [evaluate(value, along, p) for p in points]
        scale = max((abs(v) for v in numbers if math.isfinite(v)), default=0.0)
        for k, v in enumerate(numbers):
            if math.isfinite(v) and v < -SHADE_TOLERANCE * scale:
                failing[k] = True
    return failing


def grid(low: sympy.Expr, high: sympy.Expr) -> list[sympy.Expr]:
    """INTERVALS + 1 exact, evenly spaced points from ``low`` to ``high``."""
    return [low + (high - low) * sympy.Rational(k, INTERVALS) for k in range(INTERVALS + 1)]


# --------------------------------------------------------------------------
# Evaluation: the exact expression at an exact point, to DIGITS digits
# --------------------------------------------------------------------------

_FUNCTIONS = {
    sympy.sin: mpmath.sin, sympy.cos: mpmath.cos, sympy.tan: mpmath.tan, sympy.cot: mpmath.cot,
    sympy.sec: mpmath.sec, sympy.csc: mpmath.csc, sympy.sinh: mpmath.sinh, sympy.cosh: mpmath.cosh,
    sympy.tanh: mpmath.tanh, sympy.coth: mpmath.coth, sympy.exp: mpmath.exp, sympy.log: mpmath.log,
    sympy.Abs: abs,
}


def evaluate(expression: sympy.Expr, along: sympy.Symbol, point: sympy.Expr) -> float:
    """``expression`` (a function of ``along`` alone) at ``point``, evaluated with mpmath to DIGITS digits and
    rounded to a double; NaN where it is not a finite real number (a pole, a root of a negative number)."""
    with mpmath.workdps(DIGITS + 10):
        try:
            value = _mp(expression, along, _mp(as_expression(point), along, None))
        except (ZeroDivisionError, ValueError, OverflowError):
            return math.nan
        if isinstance(value, mpmath.mpc):
            if abs(value.imag) > abs(value) * mpmath.mpf(10) ** -DIGITS:
                return math.nan
            value = value.real
        if not mpmath.isfinite(value):
            return math.nan
        return float(value)


def _mp(expr: sympy.Expr, along: sympy.Symbol, x):
    if expr == along:
        return x
    if expr.is_Integer:
        return mpmath.mpf(int(expr))
    if expr.is_Rational:
        return mpmath.mpf(int(expr.p)) / int(expr.q)
    if expr is sympy.pi:
        return +mpmath.pi
    if expr is sympy.E:
        return +mpmath.e
    if expr is sympy.I:
        return mpmath.mpc(0, 1)
    if isinstance(expr, sympy.Add):
        return mpmath.fsum(_mp(a, along, x) for a in expr.args)
    if isinstance(expr, sympy.Mul):
        out = mpmath.mpf(1)
        for a in expr.args:
            out *= _mp(a, along, x)
        return out
    if isinstance(expr, sympy.Pow):
        base, exponent = _mp(expr.base, along, x), expr.exp
        if exponent.is_Integer:
            if base == 0 and exponent < 0:
                raise ZeroDivisionError
            return base ** int(exponent)
        exponent = _mp(exponent, along, x)
        if base == 0 and mpmath.re(exponent) < 0:
            raise ZeroDivisionError
        return mpmath.power(base if base >= 0 else mpmath.mpc(base), exponent) if not isinstance(base, mpmath.mpc) \
            else mpmath.power(base, exponent)
    if expr.func in _FUNCTIONS and len(expr.args) == 1:
        return _FUNCTIONS[expr.func](_mp(expr.args[0], along, x))
    if expr.is_number or (x is not None and expr.free_symbols <= {along}):  # anything else: sympy's own evaluation
        exact_x = sympy.Float(mpmath.nstr(x, DIGITS + 10), DIGITS + 10) if x is not None else None
        number = sympy.N(expr.subs(along, exact_x) if exact_x is not None else expr, DIGITS + 10)
        if number.has(sympy.zoo, sympy.nan, sympy.oo, -sympy.oo):
            raise ValueError("not finite")
        real, imaginary = number.as_real_imag()
        return mpmath.mpc(mpmath.mpf(str(real)), mpmath.mpf(str(imaginary))) if imaginary != 0 else mpmath.mpf(str(real))
    raise ValueError(f"cannot evaluate {expr}")


# --------------------------------------------------------------------------
# Captions (LaTeX) and the drawing
# --------------------------------------------------------------------------

def _quantity_words(plot: Plot, writer: ExpressionWriter) -> str:
    parts = []
    for quantity in plot.quantities:
        if quantity == "pressure":
            symbols = [c.tex for c in plot.curves if c.tex.startswith("p")] if plot.curves else []
            parts.append("the principal pressures" + (" " + ", ".join(rf"\({s}\)" for s in symbols) if symbols else ""))
        else:
            parts.append(f"the {QUANTITIES[quantity].words} \\({component_symbol(quantity, [], writer)}\\)")
    return parts[0] if len(parts) == 1 else ", ".join(parts[:-1]) + " and " + parts[-1]


def caption(derivation: Derivation, plot: Plot) -> str:
    """The plot's caption in LaTeX: what is drawn, along what, the values put in, and what the shading
    means; for a plot that cannot be drawn, why."""
    writer = _writer(derivation)
    what = _quantity_words(plot, writer)
    what = what[0].upper() + what[1:]
    along = writer.symbol(plot.along.name)
    text = rf"{what} along \({along}\) from \({writer.inline(plot.low)}\) to \({writer.inline(plot.high)}\)"
    if plot.values:
        given = ", ".join(rf"\({writer.symbol(s.name)} = {writer.inline(v)}\)" for s, v in plot.values)
        text += f", with {given}"
        if plot.default:
            text += " (the midpoints of the ranges the metric file's matter region gives)"
    if not plot.drawn:
        return text + f": not drawn, because {_escaped(plot.problem)}."
    text += (f". Values at {len(plot.points)} evenly spaced points, each evaluated to {DIGITS} digits from the "
             "recorded exact result" + (", on a logarithmic vertical scale" if plot.logarithmic else ""))
    matter = derivation.metric.matter
    if matter is not None and any(QUANTITIES[q].requires == "matter" for q in plot.quantities):
        text += (r" (geometric units, \(G = c = 1\))" if matter.units == "geometric" else
                 r" (physical units, with the values given for \(G\) and \(c\))")
    text += "."
    if plot.shade:
        extent = sum(plot.failing)
        where = ("nowhere on this range" if extent == 0 else "over the whole range" if extent == len(plot.failing)
                 else "over the shaded part of the range")
        text += (rf" Shaded: where the {plot.shade} energy condition (\({CONDITION_TEX[plot.shade]}\)) fails, that "
                 rf"is where one of its recorded inequalities is negative at the plotted points: {where}.")
    elif plot.default:
        text += " None of the null, weak, strong and dominant energy conditions fails at the plotted points."
    if plot.shade_problem:
        text += f" Not shaded: {_escaped(plot.shade_problem)}."
    return text


def _escaped(text: str) -> str:
    from .latex import escape_text
    return escape_text(text)


def report_plots(derivation: Derivation) -> list[dict[str, Any]]:
    """What the report's plot section shows: per plot its number, file name, whether it is drawn, its caption
    (LaTeX) and the width it is shown at (a fraction of the line); the orbit's last."""
    entries = [{"number": p.number, "file": p.file_name, "drawn": p.drawn, "caption": caption(derivation, p),
                "width": "1"} for p in plots(derivation)]
    orbit = orbit_plot(derivation)
    if orbit is not None:
        entries.append({"number": orbit.number, "file": orbit.file_name, "drawn": orbit.drawn,
                        "caption": orbit_caption(derivation, orbit), "width": "0.62"})
    return entries


def figure_pdf(plot: Plot) -> bytes:
    """The plot as a vector PDF (matplotlib's object interface), with no date in its metadata."""
    import matplotlib
    import matplotlib.style
    from matplotlib.backends.backend_pdf import FigureCanvasPdf
    from matplotlib.figure import Figure
    from matplotlib.patches import Patch

    with matplotlib.style.context("default"), matplotlib.rc_context(STYLE):
        figure = Figure(figsize=FIGURE_SIZE)
        FigureCanvasPdf(figure)
        axes = figure.subplots()
        for k, curve in enumerate(plot.curves):
            axes.plot(plot.x, curve.values, LINE_STYLES[k % len(LINE_STYLES)], label=f"${curve.tex}$",
                      linewidth=LINE_WIDTHS[min(k, len(LINE_WIDTHS) - 1)] if len(plot.curves) > 1 else 1.6,
                      zorder=2 + k)
        for start, end in runs(plot.failing, plot.x):
            axes.axvspan(start, end, color=SHADE_COLOUR, linewidth=0, zorder=0)
        if plot.logarithmic:
            axes.set_yscale("log")
        else:
            axes.axhline(0.0, color="0.5", linewidth=0.6, zorder=1)
        axes.set_xlim(plot.x[0], plot.x[-1])
        axes.set_xlabel(f"${_along_tex(plot)}$")
        if len(plot.curves) == 1:
            axes.set_ylabel(f"{QUANTITIES[plot.quantities[0]].words} ${plot.curves[0].tex}$")
        handles, labels = axes.get_legend_handles_labels()
        if plot.shade and any(plot.failing):
            handles.append(Patch(color=SHADE_COLOUR, linewidth=0))
            labels.append(f"{plot.shade} energy condition fails")
        if len(handles) > 1:
            axes.legend(handles, labels, loc="best", frameon=True, facecolor="white", edgecolor="0.8",
                        framealpha=1.0)
        figure.tight_layout()
        out = io.BytesIO()
        figure.savefig(out, format="pdf", metadata={"Creator": None, "Producer": None, "CreationDate": None,
                                                    "ModDate": None})
    return out.getvalue()


def _along_tex(plot: Plot) -> str:
    return ExpressionWriter().symbol(plot.along.name)


def runs(failing, x) -> list[tuple[float, float]]:
    """The stretches of the x axis where ``failing`` holds: each run of failing points widened by half a grid
    step on either side (within the range), so that a single failing point is visible."""
    out = []
    k, n = 0, len(failing)
    while k < n:
        if not failing[k]:
            k += 1
            continue
        start = k
        while k < n and failing[k]:
            k += 1
        left = x[start] - (x[start] - x[start - 1]) / 2 if start > 0 else x[0]
        right = x[k - 1] + (x[k] - x[k - 1]) / 2 if k < n else x[-1]
        out.append((left, right))
    return out


def notebook_samples(plot: Plot) -> dict[str, dict[int, float]]:
    """The values the notebook compares its own with: every NOTEBOOK_CHECK_EVERY-th point of each curve."""
    return {c.tex: {k: c.values[k] for k in range(0, len(c.values), NOTEBOOK_CHECK_EVERY)} for c in plot.curves}



# --------------------------------------------------------------------------
# The orbit of an [orbit] request: the recorded geodesic equations integrated with RK4 in mpmath
# --------------------------------------------------------------------------

#: Classical fourth-order Runge-Kutta: this many equal steps of tau over the span, in ORBIT_DIGITS-digit mpmath
#: arithmetic (exactly rounded operations, so every machine computes the same numbers).
ORBIT_STEPS = 2000
#: The orbit stops where a coordinate or rate grows beyond this size (a diverging orbit, or a corrupted record).
ORBIT_BOUND = libmp.from_int(10**9)
ORBIT_DIGITS = 20
#: The notebook's scipy solution (DOP853, rtol 1e-10) must end within this of the RK4 end point (relative for values
#: above 1); both integrators' errors on the example are far below it (RK4's global error goes as the step to the 4th).
ORBIT_END_TOLERANCE = 1e-6
#: Names of the radius and of the azimuth that make the orbit drawn in the plane as x = r cos(phi), y = r sin(phi).
RADIUS_NAMES = ("r", "rho")
AZIMUTH_NAMES = ("phi", "varphi")
ORBIT_FIGURE_SIZE = (4.4, 4.4)


@dataclass(frozen=True)
class OrbitPlot:
    """The orbit the metric file asks for, integrated and ready to draw and caption; ``problem`` says why it is
    not drawn ("" when it is)."""

    number: int
    kind: str
    time: str
    values: tuple[tuple[sympy.Symbol, sympy.Expr], ...]
    start: tuple[tuple[sympy.Symbol, sympy.Expr], ...]
    velocity: tuple[tuple[sympy.Symbol, sympy.Expr], ...]
    span: sympy.Expr
    steps: int = ORBIT_STEPS
    problem: str = ""
    #: dt/dtau at the start (exact), from the normalisation.
    time_rate: sympy.Expr | None = None
    #: How the orbit is drawn: ("polar", radius, azimuth) or ("pair", first, second) (coordinate names).
    plane: tuple[str, str, str] = ("pair", "", "")
    #: The drawn points (doubles), one per step and the start.
    x: tuple[float, ...] = ()
    y: tuple[float, ...] = ()
    #: tau where the integration ended (the span, unless the equations could not be evaluated on the way).
    reached: float = 0.0
    #: The coordinates x^a and the rates u^a at ``reached``, in the order of the coordinates (doubles).
    end: tuple[float, ...] = ()
    end_rates: tuple[float, ...] = ()
    #: The largest |g_ab u^a u^b - (its value at the start)| over the integrated points.
    drift: float = 0.0
    #: The whole integrated path, for the tests: per point (tau, coordinates, rates) as doubles.
    path: tuple[tuple[float, tuple[float, ...], tuple[float, ...]], ...] = ()

    @property
    def file_name(self) -> str:
        return f"plot-{self.number}-orbit.pdf"

    @property
    def drawn(self) -> bool:
        return not self.problem

    @property
    def normalisation(self) -> int:
        return -1 if self.kind == "timelike" else 0


def orbit_plot(derivation: Derivation) -> OrbitPlot | None:
    """The orbit of the metric file's ``[orbit]`` (recorded on the geodesic step), integrated; None without
    one (the last derivation's is kept, like :func:`plots`)."""
    if _last_orbit and _last_orbit[0] is derivation:
        return _last_orbit[1]
    step = next((s for s in derivation.steps if s.kind == "geodesic" and s.params.get("orbit")), None)
    made = None if step is None else _integrated(derivation, step, len(plots(derivation)) + 1)
    _last_orbit[:] = [derivation, made]
    return made


_last_orbit: list = []


def _integrated(derivation: Derivation, step, number: int) -> OrbitPlot:
    metric = derivation.metric
    orbit = step.params["orbit"]
    by_name = {s.name: s for s in (*metric.coordinates, *metric.parameters, *metric.extra_symbols)}
    names = list(metric.names)
    pairs = lambda table: tuple((by_name[k], as_expression(v)) for k, v in table.items())  # noqa: E731
    plot = OrbitPlot(number=number, kind=orbit["kind"], time=orbit["time"], values=pairs(orbit["values"]),
                     start=pairs(orbit["start"]), velocity=pairs(orbit["velocity"]),
                     span=as_expression(orbit["span"]))
    if plot.kind not in ("timelike", "null"):
        return _replace(plot, problem=f"the orbit kind {plot.kind} is not known")
    values = dict(plot.values)
    start = {s.name: v for s, v in plot.start}
    rates = {s.name: v for s, v in plot.velocity}
    g = metric.matrix.subs(values)
    time_rate = _time_rate(g, names, plot.time, start, rates, plot.normalisation)
    if time_rate is None:
        return _replace(plot, problem=f"no positive rate of {plot.time} satisfies the normalisation at the start")
    rates[plot.time] = time_rate
    plot = _replace(plot, time_rate=time_rate, plane=_plane(names, plot.time, start, rates))
    if len([n for n in names if n != plot.time]) < 2:
        return _replace(plot, problem="the orbit has fewer than two space coordinates to draw")
    velocity_of = step.result["position"]
    accelerations = step.result["velocity"]
    slots = {c: k for k, c in enumerate(metric.coordinates)}
    slots.update({as_expression(velocity_of[n]): len(names) + k for k, n in enumerate(names)})
    speeds = [as_expression(velocity_of[n]) for n in names]
    square = sum((g[i, j] * speeds[i] * speeds[j] for i in range(len(names)) for j in range(len(names))),
                 sympy.Integer(0))
    try:
        right = _program([as_expression(accelerations.get(n, 0)).subs(values) for n in names], slots)
        norm = _program([square], slots)
    except ValueError as error:
        return _replace(plot, problem=f"the recorded equations hold something stepper cannot evaluate ({error})")
    try:
        state = [_raw(start[n]) for n in names] + [_raw(rates[n]) for n in names]
        path, drift, reached = _runge_kutta(state, right, norm, len(names), _raw(plot.span))
    except (ZeroDivisionError, ValueError):
        path, drift, reached = [], 0.0, 0.0
    if len(path) < 2:
        return _replace(plot, problem="the recorded equations cannot be evaluated at the start")
    xs, ys = _drawn_points(plot.plane, names, path)
    tau, end, end_rates = path[-1]
    return _replace(plot, x=xs, y=ys, reached=tau, end=end, end_rates=end_rates, drift=drift, path=tuple(path))


def _time_rate(g, names, time, start, rates, normalisation) -> sympy.Expr | None:
    """u^time at the start from g_ab u^a u^b = normalisation (exact): the positive root, the larger if both are."""
    g = g.subs({c: start[c.name] for c in g.free_symbols if c.name in start})
    t = names.index(time)
    others = [k for k in range(len(names)) if k != t]
    a = g[t, t]
    b = 2 * sum((g[t, k] * rates[names[k]] for k in others), sympy.Integer(0))
    c = sum((g[i, j] * rates[names[i]] * rates[names[j]] for i in others for j in others), sympy.Integer(0)) \
        - normalisation
    a, b, c = (sympy.expand(v) for v in (a, b, c))
    if a == 0:
        roots = [] if b == 0 else [-c / b]
    else:
        root = sympy.sqrt(b**2 - 4 * a * c)
        roots = [(-b + root) / (2 * a), (-b - root) / (2 * a)]
    good = []
    for r in roots:
        r = sympy.radsimp(r)
        value = sympy.N(r, 30)
        if value.is_real and value > 0:
            good.append((value, r))
    return max(good, key=lambda pair: pair[0])[1] if good else None


def _plane(names, time, start, rates) -> tuple[str, str, str]:
    radius = next((n for n in RADIUS_NAMES if n in names), None)
    azimuth = next((n for n in AZIMUTH_NAMES if n in names), None)
    if radius and azimuth and radius != time and azimuth != time:
        if "theta" not in names or (sympy.simplify(start["theta"] - sympy.pi / 2) == 0 and rates["theta"] == 0):
            return ("polar", radius, azimuth)
    first, second = [n for n in names if n != time][:2] + [""] * max(0, 2 - len(names) + 1)
    return ("pair", first, second)


#: The Runge-Kutta arithmetic works on mpmath's raw numbers (mpmath.libmp: exactly rounded to PRECISION bits, to
#: nearest), without mpmath's number objects around them: the same numbers, several times faster.
PRECISION = libmp.dps_to_prec(ORBIT_DIGITS)
_NEAREST = libmp.round_nearest
_NOT_FINITE = (libmp.fnan, libmp.finf, libmp.fninf)


def _reciprocal_of(function):
    return lambda x, prec, rnd: libmp.mpf_div(libmp.fone, function(x, prec, rnd), prec, rnd)


_RAW_FUNCTIONS = {
    sympy.sin: libmp.mpf_sin, sympy.cos: libmp.mpf_cos, sympy.tan: libmp.mpf_tan, sympy.exp: libmp.mpf_exp,
    sympy.log: libmp.mpf_log, sympy.sinh: libmp.mpf_sinh, sympy.cosh: libmp.mpf_cosh, sympy.tanh: libmp.mpf_tanh,
    sympy.cot: _reciprocal_of(libmp.mpf_tan), sympy.sec: _reciprocal_of(libmp.mpf_cos),
    sympy.csc: _reciprocal_of(libmp.mpf_sin), sympy.coth: _reciprocal_of(libmp.mpf_tanh),
    sympy.Abs: lambda x, prec, rnd: libmp.mpf_abs(x),
}


def _raw(value: sympy.Expr):
    """An exact real number as mpmath's raw number at PRECISION bits; ValueError when it is not real."""
    with mpmath.workprec(PRECISION):
        number = _mp(as_expression(value), None, None)
    if isinstance(number, mpmath.mpc):
        if number.imag != 0:
            raise ValueError("a complex number")
        number = number.real
    return number._mpf_


def _compiled(expr: sympy.Expr, slots: dict):
    """A function of the state list (raw mpmath numbers) computing ``expr``, built once from its tree: symbols
    read their slot, numbers are made once; no text is evaluated.  A pole raises ZeroDivisionError, a complex
    value ValueError."""
    prec, rnd = PRECISION, _NEAREST
    if expr in slots:
        k = slots[expr]
        return lambda s: s[k]
    if not expr.free_symbols:
        constant = _raw(expr)
        return lambda s: constant
    if isinstance(expr, (sympy.Add, sympy.Mul)):
        parts = [_compiled(a, slots) for a in expr.args]
        operation = libmp.mpf_add if isinstance(expr, sympy.Add) else libmp.mpf_mul

        def folded(s):
            value = parts[0](s)
            for part in parts[1:]:
                value = operation(value, part(s), prec, rnd)
            return value
        return folded
    if isinstance(expr, sympy.Pow):
        base = _compiled(expr.base, slots)
        if expr.exp.is_Integer:
            n, power = int(expr.exp), libmp.mpf_pow_int
            return lambda s: power(base(s), n, prec, rnd)
        if expr.exp == sympy.Rational(1, 2):
            root = libmp.mpf_sqrt
            return lambda s: root(base(s), prec, rnd)
        exponent, power = _compiled(expr.exp, slots), libmp.mpf_pow
        return lambda s: power(base(s), exponent(s), prec, rnd)
    if expr.func in _RAW_FUNCTIONS and len(expr.args) == 1:
        function, argument = _RAW_FUNCTIONS[expr.func], _compiled(expr.args[0], slots)
        return lambda s: function(argument(s), prec, rnd)
    raise ValueError(f"no evaluation for {type(expr).__name__}")


def _program(expressions: list, slots: dict):
    """One function of the state list computing every expression of ``expressions``: their common
    subexpressions (sympy's cse) each computed once, in order, into slots after the state's, each by a function
    compiled once from its tree (:func:`_compiled`)."""
    shared, reduced = sympy.cse(expressions, symbols=sympy.numbered_symbols("_shared"), order="none")
    slots = dict(slots)
    steps = []
    for symbol, expression in shared:
        steps.append(_compiled(expression, slots))
        slots[symbol] = len(slots)
    outputs = [_compiled(e, slots) for e in reduced]

    def run(state):
        s = list(state)
        for step in steps:
            s.append(step(s))
        return [f(s) for f in outputs]
    return run


def _runge_kutta(state, right, norm_of, n, span):
    """ORBIT_STEPS classical Runge-Kutta steps of dx/dtau = u, du/dtau = acceleration from tau = 0 to ``span``
    (raw mpmath numbers at PRECISION bits); stops early where the equations cannot be evaluated or leave the
    real numbers.  Returns the path (tau, coordinates, rates as doubles, start included), the largest drift of
    g_ab u^a u^b and tau reached."""
    prec, rnd = PRECISION, _NEAREST
    add, multiply, to_float = libmp.mpf_add, libmp.mpf_mul, libmp.to_float
    h = libmp.mpf_div(span, libmp.from_int(ORBIT_STEPS), prec, rnd)
    half = libmp.mpf_div(h, libmp.from_int(2), prec, rnd)
    sixth = libmp.mpf_div(h, libmp.from_int(6), prec, rnd)
    two = libmp.from_int(2)

    def derivative(s):
        if any(libmp.mpf_gt(libmp.mpf_abs(v), ORBIT_BOUND) for v in s):
            raise ValueError("the orbit left the range it is drawn in")  # also bounds the cost of sin and cos
        values = right(s)
        if any(v in _NOT_FINITE for v in values):
            raise ValueError("not a finite number")
        return s[n:] + values

    def moved(s, by, k):
        return [add(a, multiply(by, b, prec, rnd), prec, rnd) for a, b in zip(s, k)]

    def point(k, s):
        return (float(k) * to_float(h), tuple(to_float(v) for v in s[:n]), tuple(to_float(v) for v in s[n:]))

    try:
        (first,) = norm_of(state)
    except (ZeroDivisionError, ValueError):
        return [], 0.0, 0.0
    path, drift = [point(0, state)], libmp.fzero
    for k in range(1, ORBIT_STEPS + 1):
        try:
            k1 = derivative(state)
            k2 = derivative(moved(state, half, k1))
            k3 = derivative(moved(state, half, k2))
            k4 = derivative(moved(state, h, k3))
            weighted = [add(add(p, w, prec, rnd), multiply(two, add(q, r, prec, rnd), prec, rnd), prec, rnd)
                        for p, q, r, w in zip(k1, k2, k3, k4)]
            following = moved(state, sixth, weighted)
            (norm,) = norm_of(following)
            if norm in _NOT_FINITE:
                raise ValueError("not a finite number")
            change = libmp.mpf_abs(libmp.mpf_sub(norm, first, prec, rnd))
            if libmp.mpf_gt(change, drift):
                drift = change
        except (ZeroDivisionError, ValueError, OverflowError):
            break
        state = following
        path.append(point(k, state))
    return path, to_float(drift), path[-1][0]


def _drawn_points(plane, names, path) -> tuple[tuple[float, ...], tuple[float, ...]]:
    kind, first, second = plane
    i, j = names.index(first), names.index(second)
    if kind == "polar":
        with mpmath.workdps(ORBIT_DIGITS):
            xs = tuple(float(mpmath.mpf(p[1][i]) * mpmath.cos(p[1][j])) for p in path)
            ys = tuple(float(mpmath.mpf(p[1][i]) * mpmath.sin(p[1][j])) for p in path)
        return xs, ys
    return tuple(p[1][i] for p in path), tuple(p[1][j] for p in path)


def _scientific(value: float) -> str:
    """A small positive number in LaTeX with two significant digits (such as 2.4 times ten to the -9); 0 as 0."""
    if value == 0:
        return "0"
    exponent = math.floor(math.log10(value))
    mantissa = round(value / 10 ** exponent, 1)
    if mantissa >= 10:
        mantissa, exponent = mantissa / 10, exponent + 1
    return f"{mantissa:.1f}" + (rf" \times 10^{{{exponent}}}" if exponent else "")


def orbit_caption(derivation: Derivation, orbit: OrbitPlot) -> str:
    """The orbit's caption in LaTeX: the values, the start, the span, how it was integrated (a numeric
    integration: evidence, not exact) and the drift of g_ab u^a u^b; for an orbit that cannot be drawn, why."""
    writer = _writer(derivation)
    sym = lambda name: writer.symbol(name)  # noqa: E731
    tau = r"\tau"
    kind = (r"timelike geodesic (\(\tau\) is proper time)" if orbit.kind == "timelike"
            else r"null geodesic (\(\tau\) is an affine parameter)")
    text = f"The orbit the metric file asks for: a {kind} of the recorded geodesic equations"
    if orbit.values:
        text += ", with " + ", ".join(rf"\({sym(s.name)} = {writer.inline(v)}\)" for s, v in orbit.values)
    text += (", from " + ", ".join(rf"\({sym(s.name)} = {writer.inline(v)}\)" for s, v in orbit.start)
             + " with " + ", ".join(rf"\(d{sym(s.name)}/d{tau} = {writer.inline(v)}\)" for s, v in orbit.velocity))
    if orbit.time_rate is not None:
        text += (rf" and \(d{sym(orbit.time)}/d{tau} = {writer.inline(orbit.time_rate)}\), the positive root of "
                 rf"\(g_{{ab}} u^a u^b = {orbit.normalisation}\) at the start")
    text += rf", over \({tau}\) from \(0\) to \({writer.inline(orbit.span)}\)"
    if not orbit.drawn:
        return text + f": not drawn, because {_escaped(orbit.problem)}."
    kind_of_plane, first, second = orbit.plane
    if kind_of_plane == "polar":
        text += (rf". Drawn in the plane \(x = {sym(first)} \cos {sym(second)}\), \(y = {sym(first)} \sin "
                 rf"{sym(second)}\) (equal scales); the dot marks the start, the cross the centre \({sym(first)} = 0\)")
    else:
        text += rf". Drawn as \({sym(second)}\) against \({sym(first)}\); the dot marks the start"
    text += (rf". A numeric integration, evidence and not an exact result: the classical fourth-order Runge--Kutta "
             rf"scheme with {orbit.steps} equal steps of \({tau}\), in {ORBIT_DIGITS}-digit arithmetic")
    reached = sympy.Rational(orbit.reached).limit_denominator(10**6)
    if orbit.reached < float(orbit.span):
        text += (rf"; it stopped at \({tau} = {writer.inline(reached)}\), where the equations could no longer be "
                 "evaluated")
    text += (rf". Accuracy check: the exact equations keep \(g_{{ab}} u^a u^b\) at its starting value; along the "
             rf"computed orbit it drifts by at most \({_scientific(orbit.drift)}\).")
    return text


def orbit_pdf(orbit: OrbitPlot) -> bytes:
    """The orbit as a vector PDF (matplotlib's object interface), with no date in its metadata."""
    import matplotlib
    import matplotlib.style
    from matplotlib.backends.backend_pdf import FigureCanvasPdf
    from matplotlib.figure import Figure

    kind, first, second = orbit.plane
    writer = ExpressionWriter()
    with matplotlib.style.context("default"), matplotlib.rc_context(STYLE):
        figure = Figure(figsize=ORBIT_FIGURE_SIZE)
        FigureCanvasPdf(figure)
        axes = figure.subplots()
        axes.plot(orbit.x, orbit.y, "-", linewidth=0.8, color="C0", zorder=2)
        axes.plot([orbit.x[0]], [orbit.y[0]], "o", color="C3", markersize=5, zorder=3, label="start")
        if kind == "polar":
            axes.plot([0.0], [0.0], "+", color="0.2", markersize=9, markeredgewidth=1.2, zorder=3, label="centre")
            axes.set_xlabel(f"$x = {writer.symbol(first)}\\,\\cos {writer.symbol(second)}$")
            axes.set_ylabel(f"$y = {writer.symbol(first)}\\,\\sin {writer.symbol(second)}$")
            axes.set_aspect("equal", adjustable="datalim")
        else:
            axes.set_xlabel(f"${writer.symbol(first)}$")
            axes.set_ylabel(f"${writer.symbol(second)}$")
        axes.legend(loc="upper right", frameon=True, facecolor="white", edgecolor="0.8", framealpha=1.0)
        figure.tight_layout()
        out = io.BytesIO()
        figure.savefig(out, format="pdf", metadata={"Creator": None, "Producer": None, "CreationDate": None,
                                                    "ModDate": None})
    return out.getvalue()
