"""The notebook's cells for the steps beyond curvature (matter, ansatz, geodesics, the orbit): they run
top to bottom, a corrupted recorded value stops exactly the cell of its step, and the text is the same
for the same input."""

from __future__ import annotations

import contextlib
import dataclasses
import io
import textwrap
from pathlib import Path

import nbformat
import pytest
import sympy as sp
from nbclient.exceptions import CellExecutionError

from stepper import derive, load_metric
from stepper.notebook import notebook_text

from test_notebook import EXAMPLES, code_cells, corrupted, derived, exported, run_in_kernel, run_in_process

#: The examples whose metric files ask for matter, an ansatz or an orbit.
BEYOND_CURVATURE = ["closed_static_universe", "wormhole_passage", "exterior_from_ansatz", "compact_star_exterior"]


def with_params(derivation, step_id: str, change):
    """The derivation with one step's recorded params replaced by change(params)."""
    steps = [dataclasses.replace(s, params=change(dict(s.params))) if s.id == step_id else s
             for s in derivation.steps]
    assert any(s.id == step_id for s in derivation.steps), step_id
    return dataclasses.replace(derivation, steps=tuple(steps))


def failing_step(derivation) -> str | None:
    return run_in_process(nbformat.reads(notebook_text(derivation), as_version=4))


def from_file(tmp_path: Path, name: str, text: str):
    path = tmp_path / f"{name}.toml"
    path.write_text(textwrap.dedent(text))
    return derive(load_metric(path))


def namespace_before(nb, stop) -> tuple[dict, object]:
    """Run the code cells in one namespace up to (not including) the first for which stop(cell) holds."""
    namespace: dict = {}
    for cell in code_cells(nb):
        if stop(cell):
            return namespace, cell
        with contextlib.redirect_stdout(io.StringIO()):
            exec(compile(cell.source, cell.id, "exec"), namespace)
    raise AssertionError("no such cell")


# --------------------------------------------------------------------------
# Running the notebooks
# --------------------------------------------------------------------------

@pytest.mark.slow
@pytest.mark.parametrize("name", ["closed_static_universe", "wormhole_passage", "exterior_from_ansatz"])
def test_examples_beyond_curvature_run_in_a_kernel(name, tmp_path):
    # compact_star_exterior runs in a kernel in test_notebook.py.
    nb = nbformat.reads(exported(name), as_version=4)
    run_in_kernel(nb, tmp_path)
    assert "recomputed and agree" in "".join(o.get("text", "") for o in code_cells(nb)[-1].outputs)
    assert not any(o.output_type == "error" for c in code_cells(nb) for o in c.outputs)


@pytest.mark.parametrize("name", BEYOND_CURVATURE)
def test_every_new_step_is_recomputed(name):
    d = derived(name)
    nb = nbformat.reads(exported(name), as_version=4)
    kinds = {"field equations", "raising", "frame", "frame components", "matter", "energy condition", "ansatz",
             "ode solution", "geodesic"}
    new = [s for s in d.steps if s.kind in kinds or s.id.split("/")[0] in ("stress_energy", "frame", "ansatz")]
    assert new
    for step in new:
        code = [c for c in code_cells(nb) if c.metadata.get("stepper", {}).get("step") == step.id]
        assert code and "not recomputed" not in code[0].source, step.id


@pytest.mark.slow
def test_same_input_same_notebook_bytes():
    for name in BEYOND_CURVATURE:
        again = notebook_text(derive(load_metric(EXAMPLES / f"{name}.toml")))
        assert again == exported(name), name


def test_orbit_is_integrated_and_its_invariants_checked():
    """The circular-ish orbit of compact_star_exterior keeps g_ab u^a u^b = -1, its energy and its angular
    momentum (conserved along a geodesic of a metric independent of t and phi: common practice)."""
    nb = nbformat.reads(exported("compact_star_exterior"), as_version=4)
    namespace, cell = namespace_before(nb, lambda c: c.metadata.get("stepper", {}).get("part") == "orbit")
    printed = io.StringIO()
    with contextlib.redirect_stdout(printed):
        exec(compile(cell.source, cell.id, "exec"), namespace)
    text = printed.getvalue()
    # u^t = sqrt(365)/16 at r = 10, M = 1, u^phi = 3/80 from -(1 - 2M/r) (u^t)^2 + r^2 (u^phi)^2 = -1 (worked by hand).
    assert "sqrt(365)/16" in text
    assert "g_ab u^a u^b" in text and "energy -g_tb u^b" in text and "momentum g_phib u^b" in text
    assert len([line for line in text.splitlines() if line.strip().startswith(("0 ", "200", "1000"))]) >= 3
    # Angular momentum r^2 u^phi = 100 * 3/80 = 3.75 (by hand).
    assert "momentum g_phib u^b: 3.75 at the start" in text


def test_orbit_cell_catches_wrong_equations():
    """With a slightly wrong radial acceleration the integrated orbit no longer conserves g_ab u^a u^b."""
    nb = nbformat.reads(exported("compact_star_exterior"), as_version=4)
    namespace, cell = namespace_before(nb, lambda c: c.metadata.get("stepper", {}).get("part") == "orbit")
    namespace["geodesic_acceleration"]["r"] = namespace["geodesic_acceleration"]["r"] * sp.Rational(1001, 1000)
    with pytest.raises(AssertionError, match="does not stay at its initial value"):
        with contextlib.redirect_stdout(io.StringIO()):
            exec(compile(cell.source, cell.id, "exec"), namespace)


# --------------------------------------------------------------------------
# A corrupted recorded value stops the cell of its own step
# --------------------------------------------------------------------------

def _flip(v):
    return dataclasses.replace(v, holds=not v.holds)


def _frame_vector_sign(r):
    vectors = dict(r["vectors"])
    vectors["r"] = {"r": -vectors["r"]["r"]}
    return {**r, "vectors": vectors}


def _frame_norm(r):
    return {**r, "squared_norms": {**r["squared_norms"], "theta": 2 * r["squared_norms"]["theta"]}}


A = sp.Function("A")
R = sp.Symbol("r", positive=True, real=True)

RESULT_CORRUPTIONS = [
    ("wormhole_passage", "field_equations", lambda r: {**r, "kappa": 16 * sp.pi}),
    ("wormhole_passage", "stress_energy/r,r", lambda r: -r),
    ("wormhole_passage", "stress_energy", lambda r: {k: v for k, v in r.items() if k != "theta,theta"}),
    ("wormhole_passage", "stress_energy_mixed", lambda r: {**r, "t,t": -r["t,t"]}),
    ("wormhole_passage", "stress_energy_up", lambda r: {**r, "r,r": 2 * r["r,r"]}),
    ("wormhole_passage", "verdict/trace_free", _flip),
    ("wormhole_passage", "frame", _frame_vector_sign),          # same squares, wrong direction
    ("wormhole_passage", "frame", _frame_norm),
    ("wormhole_passage", "frame/check", _flip),
    ("wormhole_passage", "frame_stress_energy", lambda r: {**r, "t,t": 3 * r["t,t"]}),
    ("wormhole_passage", "frame_ricci", lambda r: {}),
    ("wormhole_passage", "frame_riemann", lambda r: {k: -v for k, v in r.items()}),
    ("wormhole_passage", "density_and_pressures", lambda r: {**r, "energy_density": -r["energy_density"]}),
    ("wormhole_passage", "density_and_pressures", lambda r: {**r, "diagonal": False}),
    ("wormhole_passage", "verdict/perfect_fluid", _flip),
    ("wormhole_passage", "energy_conditions/null", _flip),
    ("closed_static_universe", "verdict/perfect_fluid", _flip),
    ("closed_static_universe", "energy_conditions/strong", lambda v: dataclasses.replace(v, holds=True)),
    ("exterior_from_ansatz", "ansatz/equations", lambda r: {**r, "t,t": r["t,t"] * (A(R) + 1)}),
    ("exterior_from_ansatz", "ansatz/equations", lambda r: {**r, "r,r": r["r,r"] + A(R)}),
    ("exterior_from_ansatz", "ansatz/dependence",
     lambda r: {**r, "follows": {k: {**v, "coefficient": 2 * v["coefficient"]} for k, v in r["follows"].items()}}),
    ("exterior_from_ansatz", "ansatz/dependence", lambda r: {**r, "independent": r["independent"][:1]}),
    ("exterior_from_ansatz", "ansatz/solve/1", lambda r: {**r, "solution": r["solution"] * 2}),
    ("exterior_from_ansatz", "ansatz/solve/2", lambda r: {**r, "equation": r["equation"] + A(R)}),
    ("exterior_from_ansatz", "ansatz/solution", lambda r: {**r, "r,r": r["r,r"] + 1}),
    ("exterior_from_ansatz", "ansatz/check", _flip),
    ("compact_star_exterior", "geodesic_equations",
     lambda r: {**r, "velocity": {**r["velocity"], "t": 2 * r["velocity"]["t"]}}),
]


@pytest.mark.slow
@pytest.mark.parametrize("name, step_id, change", RESULT_CORRUPTIONS)
def test_corrupted_result_stops_at_that_step(name, step_id, change):
    assert failing_step(corrupted(derived(name), step_id, change)) == step_id


def _inequality(label, **fields):
    def change(params):
        rows = dict(params["inequalities"])
        rows[label] = {**rows[label], **fields}
        return {**params, "inequalities": rows}
    return change


PARAM_CORRUPTIONS = [
    # A recorded value that is not rho (+/-) p.
    ("closed_static_universe", "energy_conditions/weak", _inequality("rho", value=sp.Integer(1))),
    # A violation recorded at a point where the value is in fact positive (Lambda = 0, a = 1: rho = 3/(8 pi)).
    ("closed_static_universe", "energy_conditions/weak",
     _inequality("rho", holds=False, decision={"method": "exact point", "holds": False,
                                               "point": {"Lambda": sp.Integer(0), "a": sp.Integer(1)},
                                               "value_there": -3 / (8 * sp.pi)})),
    # A sampled inequality claimed proven by the declared signs (Lambda is only real, so it is not).
    ("closed_static_universe", "energy_conditions/strong",
     _inequality("rho + sum p", holds=True, decision={"method": "declared signs", "holds": True})),
    # A proven non-negative inequality claimed negative everywhere.
    ("closed_static_universe", "energy_conditions/null",
     _inequality("rho + p_(chi)", holds=False, decision={"method": "declared signs", "holds": False})),
    # An inequality recorded as identically zero that is not zero.
    ("wormhole_passage", "energy_conditions/dominant",
     _inequality("rho - p_(theta)", holds=True, decision={"method": "identically zero", "holds": True})),
    ("wormhole_passage", "verdict/trace_free", lambda p: {**p, "trace": 2 * p["trace"]}),
    ("exterior_from_ansatz", "ansatz/equations",
     lambda p: {**p, "identically_zero": [k for k in p["identically_zero"] if k != "t,r"]}),
    ("exterior_from_ansatz", "ansatz/dependence",
     lambda p: {**p, "relations": {**p["relations"], "t": ["r,r", "t,t"]}}),
    ("exterior_from_ansatz", "ansatz/solve/1", lambda p: {**p, "other_branches": [R]}),
    ("exterior_from_ansatz", "ansatz/solution",
     lambda p: {**p, "rescalings": {"C1": {"coordinate": "r", "factor": sp.Symbol("C1")}}}),
]


@pytest.mark.slow
@pytest.mark.parametrize("name, step_id, change", PARAM_CORRUPTIONS)
def test_corrupted_parameter_stops_at_that_step(name, step_id, change):
    assert failing_step(with_params(derived(name), step_id, change)) == step_id

@pytest.mark.slow
def test_corrupted_frame_component_fails_in_its_own_kernel_cell(tmp_path):
    bad = corrupted(derived("wormhole_passage"), "frame_riemann", lambda r: {**r, "r,theta,r,theta": 0})
    nb = nbformat.reads(notebook_text(bad), as_version=4)
    with pytest.raises(CellExecutionError) as failure:
        run_in_kernel(nb, tmp_path)
    assert "step frame_riemann" in str(failure.value)
    cells = code_cells(nb)
    failed = [i for i, c in enumerate(cells) if any(o.output_type == "error" for o in c.outputs)]
    assert len(failed) == 1 and cells[failed[0]].metadata["stepper"]["step"] == "frame_riemann"
    assert all(c.execution_count is not None for c in cells[:failed[0]])
    assert all(c.execution_count is None for c in cells[failed[0] + 1:])


# --------------------------------------------------------------------------
# Metrics that reach the other branches
# --------------------------------------------------------------------------

ROTATING_DUST = """
    title = "Rigidly rotating dust cylinder"
    coordinates = ["t", "r", "phi", "z"]
    line_element = "-(dt + w*r^2*dphi)^2 + dr^2 + r^2*dphi^2 + dz^2"
    [symbols]
    w = "positive"
    r = "positive"
    [matter]
    [matter.region]
    w = ["1/10", "1"]
    r = ["1/10", "2"]
    [orbit]
    kind = "null"
    values = { w = "1/10" }
    start = { t = "0", r = "1", phi = "0", z = "0" }
    velocity = { r = "1/10", phi = "0", z = "1/2" }
    span = "3"
"""


@pytest.mark.slow
def test_off_diagonal_frame_components_and_a_null_orbit(tmp_path):
    """The observers normal to t = const see an energy flux T_(t)(phi) in this rotating metric, so the
    frame components carry one odd frame index (checked through their squares and signs), T is not diagonal
    in the frame (the energy conditions stay undecided) and the fluid is not at rest in the frame."""
    d = from_file(tmp_path, "rotating_dust", ROTATING_DUST)
    assert "t,phi" in d.step("frame_stress_energy").result
    assert d.step("verdict/perfect_fluid").result.holds is False
    assert failing_step(d) is None
    # The same squares with the opposite sign must be caught.
    flipped = corrupted(d, "frame_stress_energy", lambda r: {**r, "t,phi": -r["t,phi"], "phi,t": -r["phi,t"]})
    assert failing_step(flipped) == "frame_stress_energy"


def test_no_frame_when_the_time_slices_are_null(tmp_path):
    """g^uu = 0 for a plane wave in null coordinates (from memory): the slices u = const are null and there is
    no frame; the vacuum is null dust with f = 0 along the null direction, so the energy conditions are read
    along it (stepper/frames.py) and a corrupted answer is caught."""
    d = from_file(tmp_path, "plane_wave", """
        title = "Plane wave in null coordinates"
        coordinates = ["u", "v", "x", "y"]
        line_element = "-(x^2 - y^2)*du^2 - 2*du*dv + dx^2 + dy^2"
        [matter]
        time = "u"
    """)
    assert d.step("frame").result.holds is False
    assert failing_step(d) is None
    assert failing_step(corrupted(d, "frame", lambda v: dataclasses.replace(v, holds=None))) == "frame"
    assert failing_step(corrupted(d, "energy_conditions/weak", lambda v: dataclasses.replace(v, holds=False))) == \
        "energy_conditions/weak"


@pytest.mark.slow
def test_physical_units_bring_G_and_c(tmp_path):
    text = (EXAMPLES / "wormhole_passage.toml").read_text().replace('units = "geometric"', 'units = "physical"')
    d = from_file(tmp_path, "wormhole_physical", text)
    nb = nbformat.reads(notebook_text(d), as_version=4)
    setup = code_cells(nb)[0].source
    assert 'G = sp.Symbol("G", real=True, positive=True)' in setup
    assert 'c = sp.Symbol("c", real=True, positive=True)' in setup
    assert run_in_process(nb) is None
    wrong = corrupted(d, "field_equations", lambda r: {**r, "kappa": 8 * sp.pi})
    assert failing_step(wrong) == "field_equations"


# --------------------------------------------------------------------------
# The helpers of the setup cell
# --------------------------------------------------------------------------

def test_zero_test_with_roots_proves_only_identities():
    """g**2 = b holds on every branch of a square root, so a zero found with it is a proof; sqrt(x*y) and
    sqrt(x)*sqrt(y) differ when x, y < 0, so no zero may be claimed there (common practice)."""
    ns: dict = {}
    exec(compile(code_cells(nbformat.reads(exported("wormhole_passage"), as_version=4))[0].source, "setup", "exec"), ns)
    roots, vanishes = ns["vanishes_with_roots"], ns["vanishes"]
    x, y = sp.symbols("x y", real=True)
    s = sp.sqrt(x**2 + y**2 + 1)
    assert roots(s**3 - (x**2 + y**2 + 1) * s)
    assert roots(x / s * s - x)
    assert roots((s + 1 / s) * s - (x**2 + y**2 + 2))
    assert roots(sp.sqrt(x**2 + 1) * sp.sqrt(y**2 + 1) * x - x * sp.sqrt(y**2 + 1) * sp.sqrt(x**2 + 1))
    assert not roots(sp.sqrt(x * y) - sp.sqrt(x) * sp.sqrt(y))
    assert not roots(s - 1)
    assert vanishes(sp.pi * x / (2 * sp.pi) - x / 2)      # pi is one more transcendental generator
    assert not vanishes(sp.pi * x - 3 * x)


@pytest.mark.slow
def test_ansatz_with_a_cosmological_constant(tmp_path):
    """-dt^2 + a(t)^2 dx^2 + b(t)^2 dy^2 with Lambda > 0: b'' = Lambda b and a'' = Lambda a among the field
    equations (worked by hand), solved by exponentials that the check from scratch must confirm."""
    d = from_file(tmp_path, "coupled", """
        title = "Two scale factors and a cosmological constant"
        coordinates = ["t", "x", "y"]
        line_element = "-dt^2 + a(t)^2*dx^2 + b(t)^2*dy^2"
        [symbols]
        L = "positive"
        [functions]
        a = ["t"]
        b = ["t"]
        [ansatz]
        unknowns = ["a", "b"]
        cosmological_constant = "L"
    """)
    assert d.step("ansatz/check").result.holds is True
    assert failing_step(d) is None
    t, lam = sp.Symbol("t", real=True), sp.Symbol("L", positive=True, real=True)
    wrong = corrupted(d, "ansatz/solve/1", lambda r: {**r, "solution": r["solution"] * sp.exp(t)})
    assert failing_step(wrong) == "ansatz/solve/1"
    wrong = corrupted(d, "ansatz/solution", lambda r: {**r, "t,t": -1 - lam})
    assert failing_step(wrong) == "ansatz/solution"


def test_velocity_symbols_must_not_be_metric_symbols(tmp_path):
    """A metric parameter named u_r: if the recorded velocity component u_r is that very symbol, the
    recorded geodesic equations confuse the two (du^t/dtau would hold u_r**2), and the notebook must say so;
    if the derivation kept them apart, the notebook runs."""
    d = from_file(tmp_path, "clash", """
        title = "A mass parameter that happens to be called u_r"
        coordinates = ["t", "r", "theta", "phi"]
        line_element = "-(1 - 2*u_r/r)*dt^2 + dr^2/(1 - 2*u_r/r) + r^2*dtheta^2 + r^2*sin(theta)^2*dphi^2"
        [symbols]
        u_r = "real"
        r = "positive"
    """)
    velocities = set(d.step("geodesic_equations").result["position"].values())
    collides = bool(velocities & (set(d.metric.coordinates) | set(d.metric.parameters)))
    assert failing_step(d) == ("geodesic_equations" if collides else None)


def test_two_dimensions_ansatz_and_strong_condition(tmp_path):
    # In two dimensions G_ij = R_ij - R g_ij / 2 vanishes identically (R_ij = (R/2) g_ij there; common
    # practice), so every field equation of an ansatz holds for any unknown, and the strong energy
    # condition, which divides by n - 2 (Hawking & Ellis 1973, sec. 4.3, from memory), is undefined.
    d = from_file(tmp_path, "two", '''
        title = "two-dimensional ansatz"
        coordinates = ["t", "x"]
        line_element = "-F(x)*dt^2 + dx^2"
        [functions]
        F = ["x"]
        [ansatz]
        [matter]
        ''')
    assert d.results["ansatz"]["check"]["holds"] is True
    assert d.results["energy_conditions"]["strong"]["holds"] is None
    assert "not defined in two dimensions" in d.results["energy_conditions"]["strong"]["evidence"]
    assert failing_step(d) is None
    # a recorded "holds" for the strong condition is caught in its own cell
    steps = [dataclasses.replace(s, result=dataclasses.replace(s.result, holds=True))
             if s.id == "energy_conditions/strong" else s for s in d.steps]
    broken = dataclasses.replace(d, steps=tuple(steps))
    assert failing_step(broken) == "energy_conditions/strong"
