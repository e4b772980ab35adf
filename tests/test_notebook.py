"""The notebook exporter: the notebook re-checks every step with plain sympy,
runs top to bottom, stops at a corrupted step, is deterministic and never
puts metric-file text into code."""

from __future__ import annotations

import ast
import contextlib
import dataclasses
import functools
import io
from pathlib import Path

import nbformat
import pytest
import sympy as sp
from nbclient import NotebookClient
from nbclient.exceptions import CellExecutionError

from conftest import example_derivation
from stepper import Metric, derive, load_metric
from stepper.notebook import _NOTEBOOK_NAMES, NotebookError, _Source, notebook_text
from stepper.tracer import Verdict

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
ALL_EXAMPLES = sorted(p.stem for p in EXAMPLES.glob("*.toml"))
#: Cheap enough to execute in-process in every test run (the kernel runs cover three more).
IN_PROCESS = ["hyperbolic_plane", "five_dimensional_black_hole", "inflating_universe", "twisted_vacuum"]


def derived(name: str):
    """The shared, once-per-session derivation of an example (tests/conftest.py)."""
    return example_derivation(name)


@functools.lru_cache(maxsize=None)
def exported(name: str) -> str:
    return notebook_text(derived(name))


def code_cells(nb) -> list:
    return [c for c in nb.cells if c.cell_type == "code"]


def run_in_kernel(nb, directory: Path) -> None:
    NotebookClient(nb, timeout=600, kernel_name="python3",
                   resources={"metadata": {"path": str(directory)}}).execute()


def run_in_process(nb) -> str | None:
    """Execute the code cells in one namespace; the step id of the cell that raised, or None."""
    namespace: dict = {}
    for cell in code_cells(nb):
        try:
            with contextlib.redirect_stdout(io.StringIO()):
                exec(compile(cell.source, cell.id, "exec"), namespace)
        except AssertionError:
            return cell.metadata.get("stepper", {}).get("step")
    return None


def setup_namespace(text: str) -> dict:
    namespace: dict = {}
    exec(compile(code_cells(nbformat.reads(text, as_version=4))[0].source, "setup", "exec"), namespace)
    return namespace


def corrupted(derivation, step_id: str, change):
    """The derivation with one step's recorded result replaced by change(result)."""
    steps = [dataclasses.replace(s, result=change(s.result)) if s.id == step_id else s for s in derivation.steps]
    assert any(s.id == step_id for s in steps), step_id
    return dataclasses.replace(derivation, steps=tuple(steps))


# --------------------------------------------------------------------------
# Running the notebook
# --------------------------------------------------------------------------

@pytest.mark.slow
@pytest.mark.parametrize("name", ["compact_star_exterior", "expanding_dust_universe", "round_sphere"])
def test_notebook_runs_top_to_bottom_in_a_kernel(name, tmp_path):
    nb = nbformat.reads(exported(name), as_version=4)
    run_in_kernel(nb, tmp_path)
    last = code_cells(nb)[-1]
    assert "recomputed and agree" in "".join(o.get("text", "") for o in last.outputs)
    assert not any(o.output_type == "error" for c in code_cells(nb) for o in c.outputs)


@pytest.mark.slow
@pytest.mark.parametrize("name", IN_PROCESS)
def test_notebook_runs_in_process(name):
    assert run_in_process(nbformat.reads(exported(name), as_version=4)) is None

@pytest.mark.slow
def test_corrupted_component_fails_in_its_own_cell(tmp_path):
    bad = corrupted(derived("compact_star_exterior"), "christoffel/r,t,t", lambda r: 2 * r)
    nb = nbformat.reads(notebook_text(bad), as_version=4)
    with pytest.raises(CellExecutionError) as failure:
        run_in_kernel(nb, tmp_path)
    assert "step christoffel/r,t,t" in str(failure.value)
    cells = code_cells(nb)
    failed = [i for i, c in enumerate(cells) if any(o.output_type == "error" for o in c.outputs)]
    assert len(failed) == 1
    assert cells[failed[0]].metadata["stepper"]["step"] == "christoffel/r,t,t"
    assert all(c.execution_count is not None for c in cells[:failed[0]])   # every earlier cell ran and passed
    assert all(c.execution_count is None for c in cells[failed[0] + 1:])   # nothing after it ran


@pytest.mark.parametrize("step_id, change", [
    ("metric_derivatives", lambda r: {**r, next(iter(r)): 0}),
    ("determinant", lambda r: r + 1),
    ("inverse_metric", lambda r: {k: v * (2 if k == "t,t" else 1) for k, v in r.items()}),
    ("riemann/t,r,t,r", lambda r: -r),
    ("christoffel", lambda r: {k: v for k, v in r.items() if k != "r,t,t"}),
    ("ricci_by_trace_identity", lambda r: {**r, "t,t": sp.Integer(1)}),
    ("scalar", lambda r: r + sp.Symbol("M", positive=True, real=True)),
    ("riemann_lowered", lambda r: {k: v + 1 for k, v in r.items()}),
    ("kretschmann", lambda r: r / 2),
    ("weyl", lambda r: {}),
    ("verdict/ricci_flat", lambda v: dataclasses.replace(v, holds=False)),
    ("verdict/constant_curvature", lambda v: dataclasses.replace(v, holds=True)),
    ("ricci/symmetry", lambda v: dataclasses.replace(v, holds=False)),
])
@pytest.mark.slow
def test_each_kind_of_corruption_stops_at_that_step(step_id, change):
    bad = corrupted(derived("compact_star_exterior"), step_id, change)
    assert run_in_process(nbformat.reads(notebook_text(bad), as_version=4)) == step_id


def test_corrupted_free_function_result_is_caught():
    a = sp.Function("a")
    t = sp.Symbol("t", real=True)
    bad = corrupted(derived("expanding_dust_universe"), "riemann/t,x,t,x",
                    lambda r: r + sp.Derivative(a(t), t) ** 2)
    assert run_in_process(nbformat.reads(notebook_text(bad), as_version=4)) == "riemann/t,x,t,x"


# --------------------------------------------------------------------------
# Exact source for the recorded expressions
# --------------------------------------------------------------------------

def expressions(value):
    if isinstance(value, dict):
        for inner in value.values():
            yield from expressions(inner)
    elif isinstance(value, sp.Basic):
        yield value


@pytest.mark.parametrize("name", ALL_EXAMPLES)
def test_printed_source_recreates_every_recorded_expression(name):
    d = derived(name)
    namespace = setup_namespace(exported(name))
    source = _Source(d)
    values = list(d.metric.matrix) + [e for s in d.steps if not isinstance(s.result, Verdict)
                                       for e in expressions(s.result)]
    assert values
    for value in values:
        text = source.expr(value)
        assert eval(text, namespace) == value, text


def test_rationals_stay_exact():
    d = derived("round_sphere")
    namespace = setup_namespace(exported("round_sphere"))
    rho = sp.Symbol("rho", real=True, positive=True)
    source = _Source(d)
    theta = sp.Symbol("theta", real=True, positive=True)
    for value in (sp.Rational(1, 2), -sp.Rational(3, 2) * rho, rho ** sp.Rational(3, 2), rho + sp.Rational(1, 3),
                  rho ** -sp.Rational(1, 2), sp.pi / 4 + sp.sqrt(rho),
                  -((rho + 1) / theta), sp.Rational(2, 3) * ((rho + 1) * sp.sin(theta) / (rho - theta)),
                  theta - 2 * ((rho + 1) / theta) ** 2):
        text = source.expr(value)
        assert "." not in text
        namespace.update({name: getattr(sp, name) for name in source.sympy_names})  # as the setup cell would
        assert eval(text, namespace) == value, text
    with pytest.raises(NotebookError):
        source.expr(sp.Float(0.5) * rho)


def test_vanishes_decides_exactly():
    ns = setup_namespace(exported("expanding_dust_universe"))
    vanishes = ns["vanishes"]
    x, y = sp.symbols("x y", real=True)
    f = sp.Function("f")
    assert vanishes(sp.sin(x) ** 2 + sp.cos(x) ** 2 - 1)
    assert vanishes(sp.cosh(y) ** 2 - sp.sinh(y) ** 2 - 1)
    assert vanishes((sp.cos(x) ** 4 - sp.sin(x) ** 4) / sp.sin(x) - (1 - 2 * sp.sin(x) ** 2) / sp.sin(x))
    assert vanishes(sp.tan(x) * sp.cos(x) - sp.sin(x))
    assert vanishes(sp.Derivative(f(x) ** 2, x).doit() - 2 * f(x) * sp.Derivative(f(x), x))
    assert vanishes(sp.exp(2 * x) - sp.exp(x) ** 2)            # outside the field: sp.simplify
    assert not vanishes(sp.sin(x) ** 2 + sp.cos(x) ** 2)
    assert not vanishes(sp.cos(x))
    assert not vanishes(sp.Derivative(f(x), x, 2) - sp.Derivative(f(x), x))
    assert not vanishes(x / (x + 1) - 1)


# --------------------------------------------------------------------------
# Determinism, structure, templates
# --------------------------------------------------------------------------

def test_same_input_same_text():
    first = notebook_text(derived("compact_star_exterior"))
    again = notebook_text(derive(load_metric(EXAMPLES / "compact_star_exterior.toml")))
    assert first == again
    nb = nbformat.reads(first, as_version=4)
    nbformat.validate(nb)
    assert [c.id for c in nb.cells] == [f"cell-{i:04d}" for i in range(1, len(nb.cells) + 1)]
    assert nb.metadata["kernelspec"]["name"] == "python3"


@pytest.mark.parametrize("name", ALL_EXAMPLES)
def test_every_step_has_a_markdown_and_a_recomputing_code_cell(name):
    d = derived(name)
    nb = nbformat.reads(exported(name), as_version=4)
    for step in d.steps:
        cells = [c for c in nb.cells if c.metadata.get("stepper", {}).get("step") == step.id
                 and "part" not in c.metadata["stepper"]]
        assert [c.cell_type for c in cells] == ["markdown", "code"], step.id
        assert step.id in cells[0].source
        assert "not recomputed" not in cells[1].source, step.id
    # An orbit asked for in the metric file gets one more pair of cells, after the geodesic equations.
    orbit = [c for c in nb.cells if c.metadata.get("stepper", {}).get("part") == "orbit"]
    asks_for_orbit = d.metric.orbit is not None
    assert [c.cell_type for c in orbit] == (["markdown", "code"] if asks_for_orbit else [])
    # Only sympy, mpmath (which sympy itself requires) and the standard library's itertools are
    # imported, never stepper; the orbit cell alone imports numpy and scipy.
    imported = set()
    for cell in code_cells(nb):
        for node in ast.walk(ast.parse(cell.source)):
            if isinstance(node, ast.Import):
                imported |= {alias.name for alias in node.names}
            elif isinstance(node, ast.ImportFrom):
                imported.add(node.module)
    # The plots' cells (stepper.plots) alone import math, io, matplotlib and IPython's display, to draw.
    has_plots = any("def check_plot" in cell.source or "def check_orbit_plot" in cell.source for cell in code_cells(nb))
    # The algebraic type's helpers (stepper/runtime/petrov.py) import random, seeded with fixed text, for their
    # exact rational point.
    has_petrov = any("def point_rational" in cell.source for cell in code_cells(nb))
    assert imported == {"itertools", "sympy", "mpmath"} | ({"numpy", "scipy.integrate"} if asks_for_orbit else set()) \
        | ({"math", "io", "matplotlib.figure", "IPython.display"} if has_plots else set()) \
        | ({"random"} if has_petrov else set())


class _TopLevelNames(ast.NodeVisitor):
    """Names a cell binds in the notebook's global namespace (not inside functions,
    lambdas or comprehensions, whose names are local)."""

    def __init__(self):
        self.names: set[str] = set()

    def visit_FunctionDef(self, node):
        self.names.add(node.name)

    def visit_Lambda(self, node):
        pass

    visit_ListComp = visit_SetComp = visit_DictComp = visit_GeneratorExp = visit_Lambda

    def visit_Name(self, node):
        if isinstance(node.ctx, ast.Store):
            self.names.add(node.id)

    def visit_Import(self, node):
        self.names |= {(alias.asname or alias.name).split(".")[0] for alias in node.names}

    visit_ImportFrom = visit_Import


def top_level_names(source: str) -> set[str]:
    visitor = _TopLevelNames()
    visitor.visit(ast.parse(source))
    return visitor.names


@pytest.mark.parametrize("name", ALL_EXAMPLES)
def test_top_level_names_cannot_shadow_metric_symbols(name):
    """Every global a code cell binds is one of the notebook's own names, an imported
    sympy name, or a symbol or function defined once in the setup cell; so no cell
    overwrites a metric symbol."""
    d = derived(name)
    cells = code_cells(nbformat.reads(exported(name), as_version=4))
    metric_names = {s.name for s in d.metric.coordinates + d.metric.parameters} | \
                   {f.func.__name__ for f in d.metric.functions}
    # Symbols the derivation introduced (integration constants, velocity components u_x, a Lambda used only
    # by [matter]) are defined once in the setup cell too, each under its own variable.
    introduced = {variable for variable, _ in _Source(d).others}
    setup = top_level_names(cells[0].source)
    assert not metric_names & _NOTEBOOK_NAMES
    assert not introduced & (_NOTEBOOK_NAMES | metric_names)
    # the variables of the free functions (a name sympy uses gets its own, Lambda -> Lambda_), and those a matter
    # model's solved form introduced (the mass function m)
    functions = set(_Source(d).functions.values())
    assert setup - metric_names - introduced - functions - _NOTEBOOK_NAMES <= set(sp.__all__)   # the imported sympy names
    for cell in cells[1:]:
        assert top_level_names(cell.source) <= _NOTEBOOK_NAMES, cell.id


def test_metric_names_that_clash_get_other_variables():
    metric, check, k = sp.symbols("metric check k", real=True, positive=True)
    x, y = sp.symbols("x y", real=True)
    component = sp.Function("component")(x)
    m = Metric.from_matrix([x, y], sp.Matrix([[metric * k, 0], [0, check * component ** 2]]))
    nb = nbformat.reads(notebook_text(derive(m)), as_version=4)
    setup = code_cells(nb)[0].source
    assert 'metric_ = sp.Symbol("metric", real=True, positive=True)' in setup
    assert 'component_ = sp.Function("component")' in setup
    assert run_in_process(nb) is None


def test_names_that_are_not_identifiers_are_refused():
    x, y = sp.symbols("x y", real=True)
    odd = sp.Symbol("a b", positive=True)
    with pytest.raises(NotebookError):
        notebook_text(derive(Metric.from_matrix([x, y], sp.Matrix([[odd, 0], [0, 1 + x ** 2]]))))


def test_templates_given_first_restyle_the_text(tmp_path):
    folder = tmp_path / "notebook"
    folder.mkdir()
    (folder / "explanations.md.j2").write_text(
        "<% macro christoffel_component(step, dimension) %>Our seminar's words for << step.id >>.<% endmacro %>\n")
    text = notebook_text(derived("round_sphere"), templates=[tmp_path])
    assert "Our seminar's words for christoffel/theta,phi,phi." in text
    assert text != exported("round_sphere")
    assert notebook_text(derived("round_sphere"), templates=[tmp_path]) == text


# --------------------------------------------------------------------------
# Nothing from the metric file reaches a code cell
# --------------------------------------------------------------------------

PAYLOAD = "__import__('os').system('touch pwned')"

@pytest.mark.slow
def test_metric_text_never_reaches_code(tmp_path):
    source = tmp_path / "evil.toml"
    source.write_text(
        "title = '''Sphere \"\"\" " + PAYLOAD + "\\n'''\n"
        "notes = '''\"\"\"\n" + PAYLOAD + "\n\"\"\" ; " + PAYLOAD + "'''\n"
        'coordinates = ["theta", "phi"]\n'
        'line_element = "R^2*dtheta^2 + R^2*sin(theta)^2*dphi^2"\n'
        "[symbols]\nR = \"positive\"\n")
    metric = load_metric(source)
    assert PAYLOAD in metric.title and PAYLOAD in metric.notes
    text = notebook_text(derive(metric))
    nb = nbformat.reads(text, as_version=4)
    code = "\n".join(c.source for c in code_cells(nb))
    assert "__import__" not in code and "pwned" not in code and "Sphere" not in code
    assert "pwned" in nb.cells[0].source                  # shown as text in markdown
    run_in_kernel(nb, tmp_path)
    assert not (tmp_path / "pwned").exists()


def test_metric_cell_rederives_the_matrix_from_the_line_element():
    """The line element is written into the notebook as sympy code and expanded there, so the metric step is
    checked against an independent reading of the input, not against the recorded matrix."""
    nb = nbformat.reads(exported("compact_star_exterior"), as_version=4)
    cell = next(c for c in code_cells(nb) if c.metadata.get("stepper", {}).get("step") == "metric")
    assert "line_element = " in cell.source and "metric_from_line_element(line_element, [dt, dr, dtheta, dphi])" \
        in cell.source
    assert "sp.Matrix([" not in cell.source
    bad = corrupted(derived("compact_star_exterior"), "metric", lambda r: {**r, "r,r": 2 * r["r,r"]})
    assert run_in_process(nbformat.reads(notebook_text(bad), as_version=4)) == "metric"
