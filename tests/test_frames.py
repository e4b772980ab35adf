"""Frames and null vectors of the metric file's own ([frame]), null directions read off the metric, and the
energy conditions of null dust (a plane wave, Vaidya's radiating metrics).

Physics is checked against an independent plain-sympy computation of the Einstein tensor written here (no
stepper code), and against values from memory named beside each check.
"""

from __future__ import annotations

import json

import pytest
import sympy as sp

from stepper.chain import _Chain, derive
from stepper.errors import InputError
from stepper.frames import user_null_tetrad
from stepper.metricfile import metric_from_data
from stepper.record import FrameRequest, Method
from stepper.trace import load_trace, trace_json
from stepper.runtime import core
from stepper.runtime import matter as matter_runtime

import tomllib


def metric(text: str):
    return metric_from_data(tomllib.loads(text))


def einstein_plain(g: sp.Matrix, x: list) -> sp.Matrix:
    """G_ab of g by the textbook formulas, in plain sympy (independent of stepper)."""
    n = len(x)
    ginv = sp.simplify(g.inv())
    gamma = [[[sp.simplify(sum(ginv[a, d] * (sp.diff(g[d, b], x[c]) + sp.diff(g[d, c], x[b]) - sp.diff(g[b, c], x[d]))
                                for d in range(n)) / 2) for c in range(n)] for b in range(n)] for a in range(n)]
    ricci = sp.zeros(n, n)
    for b in range(n):
        for c in range(n):
            ricci[b, c] = sp.simplify(sum(sp.diff(gamma[a][b][c], x[a]) - sp.diff(gamma[a][b][a], x[c])
                                          + sum(gamma[a][a][d] * gamma[d][b][c] - gamma[a][c][d] * gamma[d][b][a]
                                                for d in range(n)) for a in range(n)))
    scalar = sp.simplify(sum(ginv[a, b] * ricci[a, b] for a in range(n) for b in range(n)))
    return sp.simplify(ricci - scalar * g / 2)


PLANE_WAVE = '''
coordinates = ["u", "v", "x", "y"]
line_element = "-H*du^2 - 2*du*dv + dx^2 + dy^2"
[functions]
A = ["u"]
B = {B}
[abbreviations]
H = "A(u)*(x^2 - y^2) + B(u)*(x^2 + y^2)"
[matter]
units = "geometric"
'''

VAIDYA_IN = '''
coordinates = ["v", "r", "theta", "phi"]
line_element = "-(1 - 2*m(v)/r)*dv^2 + 2*dv*dr + r^2*dtheta^2 + r^2*sin(theta)^2*dphi^2"
[symbols]
r = "positive"
[functions]
m = {M}
[matter]
units = "geometric"
'''

STAR = '''
coordinates = ["t", "r", "theta", "phi"]
line_element = "-(1 - 2*M/r)*dt^2 + dr^2/(1 - 2*M/r) + r^2*dtheta^2 + r^2*sin(theta)^2*dphi^2"
[symbols]
M = "positive"
r = "positive"
[matter]
units = "geometric"
[frame]
kind = "orthonormal"
index = "{index}"
[frame.vectors]
{vectors}
'''

STAR_UP = '''t = { t = "1/sqrt(1 - 2*M/r)" }
r = { r = "sqrt(1 - 2*M/r)" }
theta = { theta = "1/r" }
phi = { phi = "1/(r*sin(theta))" }'''

# The same frame as covectors e_(a)i = g_ij e_(a)^j: e_(t) = -sqrt(f) dt, e_(r) = dr/sqrt(f), r dtheta, r sin dphi.
STAR_DOWN = '''t = { t = "-sqrt(1 - 2*M/r)" }
r = { r = "1/sqrt(1 - 2*M/r)" }
theta = { theta = "r" }
phi = { phi = "r*sin(theta)" }'''


def condition(d, key):
    return d.step(f"energy_conditions/{key}")


# -- the plane wave --------------------------------------------------------------------------------------

def test_plane_wave_null_dust_density_agrees_with_an_independent_einstein_tensor():
    # pp-wave ds^2 = -H du^2 - 2 du dv + dx^2 + dy^2: R_uu = (H_xx + H_yy)/2 is the only Ricci component and
    # R = 0, so T_uu = G_uu/(8 pi) = (H_xx + H_yy)/(16 pi) = B/(4 pi) for this H (from memory; Griffiths &
    # Podolsky, Exact Space-Times, sec. 17.1), and the plain-sympy Einstein tensor below confirms it.
    d = derive(metric(PLANE_WAVE.replace("{B}", '{ of = ["u"], sign = "nonnegative" }')), curvature_invariants=False)
    u, v, x, y = sp.symbols("u v x y", real=True)
    A, B = sp.Function("A")(u), sp.Function("B")(u)
    H = A * (x**2 - y**2) + B * (x**2 + y**2)
    G = einstein_plain(sp.Matrix([[-H, -1, 0, 0], [-1, 0, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1]]), [u, v, x, y])
    assert sp.simplify(G[0, 0] / (8 * sp.pi) - B / (4 * sp.pi)) == 0
    assert all(sp.simplify(G[i, j]) == 0 for i in range(4) for j in range(4) if (i, j) != (0, 0))
    dust = d.step("null_dust")
    assert dust.result.holds is True
    assert sp.simplify(dust.params["density"] - B / (4 * sp.pi)) == 0
    null = condition(d, "null")
    assert null.result.holds is True and null.params["route"] == "null dust"
    row = null.params["inequalities"]["f"]
    assert row["decision"]["method"] == Method.DECLARED_SIGNS.value
    assert row["decision"]["function_signs"] == [{"function": "B", "derivative": None, "sign": "nonnegative"}]
    for key in ("weak", "strong", "dominant"):  # null dust: every condition holds exactly when f >= 0
        assert condition(d, key).result.holds is True


def test_plane_wave_without_a_sign_reduces_the_condition_to_f_nonnegative():
    d = derive(metric(PLANE_WAVE.replace("{B}", '["u"]')), curvature_invariants=False)
    null = condition(d, "null")
    assert null.result.holds is None
    row = null.params["inequalities"]["f"]
    assert row["decision"]["method"] == Method.FREE_FUNCTIONS.value
    assert "reduces to f = B(u)/(4*pi) >= 0" in null.result.evidence


def test_plane_wave_with_a_negative_profile_violates_the_null_condition():
    d = derive(metric(PLANE_WAVE.replace("{B}", '{ of = ["u"], sign = "negative" }')), curvature_invariants=False)
    assert condition(d, "null").result.holds is False


def test_null_directions_of_the_plane_wave_are_read_off_the_metric():
    d = derive(metric(PLANE_WAVE.replace("{B}", '["u"]')), curvature_invariants=False)
    step = d.step("null_directions")
    assert step.result.holds is True
    directions = step.params["directions"]
    # g_vv = 0 and g^uu = 0 for this metric (by inspection: the (u, v) block [[-H, -1], [-1, 0]] has inverse
    # [[0, -1], [-1, H]]); du raised is -d_v
    assert directions["d_v"]["source"] == "coordinate vector"
    assert directions["du"]["source"] == "coordinate gradient"
    assert directions["du"]["upper"] == {"v": -1}


# -- Vaidya ----------------------------------------------------------------------------------------------

@pytest.mark.parametrize("sign, holds", [("nonnegative", True), ("negative", False)])
def test_ingoing_vaidya_null_condition_is_decided_by_the_sign_of_dm_dv(sign, holds):
    # Ingoing Vaidya: T_vv = m'(v)/(4 pi r^2) (Vaidya 1951; from memory), confirmed by the plain-sympy
    # Einstein tensor; the null energy condition holds exactly when m' >= 0.
    text = VAIDYA_IN.replace("{M}", f'{{ of = ["v"], derivative_sign = "{sign}" }}')
    d = derive(metric(text), curvature_invariants=False)
    v, r, th, ph = sp.symbols("v r theta phi", real=True)
    m = sp.Function("m")(v)
    f = 1 - 2 * m / r
    G = einstein_plain(sp.Matrix([[-f, 1, 0, 0], [1, 0, 0, 0], [0, 0, r**2, 0], [0, 0, 0, r**2 * sp.sin(th)**2]]),
                       [v, r, th, ph])
    expected = sp.diff(m, v) / (4 * sp.pi * r**2)
    assert sp.simplify(G[0, 0] / (8 * sp.pi) - expected) == 0
    dust = d.step("null_dust")
    assert dust.result.holds is True
    assert sp.simplify(dust.params["density"].subs(sp.Symbol("r", positive=True), r) - expected) == 0
    assert condition(d, "null").result.holds is holds


def test_charged_vaidya_is_not_null_dust_and_null_vectors_alone_decide_nothing():
    # Vaidya-Bonnor: the charge adds an electromagnetic stress-energy, so T is not f k k; T_rr = 0 along d_r
    # proves T(k, k) >= 0 along that one null vector only, which is not the null energy condition.
    text = VAIDYA_IN.replace("(1 - 2*m(v)/r)", "(1 - 2*m(v)/r + q^2/r^2)").replace(
        "{M}", '{ of = ["v"], derivative_sign = "nonnegative" }').replace('r = "positive"', 'r = "positive"\nq = "positive"')
    d = derive(metric(text), curvature_invariants=False)
    assert d.step("null_dust").result.holds is False
    null = condition(d, "null")
    assert null.params["route"] == "null vectors"
    assert null.result.holds is None
    assert all(row["holds"] is True for row in null.params["inequalities"].values())
    assert "not decided" in null.result.evidence
    assert condition(d, "weak").result.holds is None


# -- a given orthonormal frame -----------------------------------------------------------------------------

@pytest.mark.parametrize("index, vectors", [("up", STAR_UP), ("down", STAR_DOWN)])
def test_a_given_orthonormal_frame_for_a_static_star_is_checked_and_used(index, vectors):
    d = derive(metric(STAR.replace("{index}", index).replace("{vectors}", vectors)), curvature_invariants=False)
    check = d.step("frame/given/check")
    assert check.result.holds is True and check.params["count"] == 10
    assert d.step("frame").params["given"] is True
    M, r = sp.symbols("M r", positive=True)
    # Schwarzschild in the static orthonormal frame: R_trtr = -2M/r^3, R_tθtθ = M/r^3, R_θφθφ = 2M/r^3
    # (from memory; e.g. Misner, Thorne & Wheeler, Gravitation, eq. 31.4)
    riemann = d.results["frame_riemann"]
    assert sp.simplify(riemann["t,r,t,r"] + 2 * M / r**3) == 0
    assert sp.simplify(riemann["t,theta,t,theta"] - M / r**3) == 0
    assert sp.simplify(riemann["theta,phi,theta,phi"] - 2 * M / r**3) == 0
    assert all(condition(d, key).result.holds is True for key in ("null", "weak", "strong", "dominant"))


def test_a_frame_that_is_not_orthonormal_is_refused_as_a_frame():
    wrong = STAR_UP.replace('r = { r = "sqrt(1 - 2*M/r)" }', 'r = { r = "1 - 2*M/r" }')
    d = derive(metric(STAR.replace("{index}", "up").replace("{vectors}", wrong)), curvature_invariants=False)
    assert d.step("frame/given/check").result.holds is False
    assert d.results["frame"]["built"] is False
    assert d.step("energy_conditions/null").result.holds is None


# -- null tetrads --------------------------------------------------------------------------------------

def test_null_tetrad_of_the_plane_wave_and_from_an_orthonormal_frame():
    # l = d_v, n = d_u - H/2 d_v, m = (d_x + i d_y)/sqrt 2 (by hand from g_uu = -H, g_uv = -1, g_vv = 0)
    text = PLANE_WAVE.replace("{B}", '["u"]') + '''
[frame]
kind = "null"
[frame.vectors]
l = { v = "1" }
n = { u = "1", v = "-H/2" }
m = { x = "1/sqrt(2)", y = ["0", "1/sqrt(2)"] }
'''
    m = metric(text)
    chain = _Chain(m, lambda *args: None, None, False)
    chain.run()
    before = len(chain.tracer.steps)
    first = user_null_tetrad(chain)
    assert user_null_tetrad(chain) == first and len(chain.tracer.steps) == before  # recorded once
    (l, n, mm, mbar), step_id = first
    assert step_id == "frame/given/check" and chain.tracer.steps[[s.id for s in chain.tracer.steps].index(step_id)]
    g = sp.Matrix(m.matrix)

    def dot(a, b):
        return sp.simplify((sp.Matrix([a]) * g * sp.Matrix(b))[0])
    assert dot(l, n) == -1 and dot(mm, mbar) == 1
    assert dot(l, l) == dot(n, n) == dot(mm, mm) == dot(l, mm) == dot(n, mm) == 0
    star = metric(STAR.replace("{index}", "up").replace("{vectors}", STAR_UP))
    chain = _Chain(star, lambda *args: None, None, False)
    chain.run()
    (l, n, mm, mbar), _ = user_null_tetrad(chain)
    g = sp.Matrix(star.matrix)
    assert dot(l, n) == -1 and dot(mm, mbar) == 1 and dot(l, l) == 0 and dot(mm, mm) == 0


def test_without_a_frame_there_is_no_user_tetrad():
    text = PLANE_WAVE.replace("{B}", '["u"]')
    chain = _Chain(metric(text), lambda *args: None, None, False)
    chain.run()
    assert user_null_tetrad(chain) is None


# -- reading and writing ---------------------------------------------------------------------------------

def test_frame_table_is_read_and_survives_the_trace():
    text = STAR.replace("{index}", "down").replace("{vectors}", STAR_DOWN)
    m = metric(text)
    assert isinstance(m.frame, FrameRequest) and m.frame.index == "down"
    assert [label for label, _ in m.frame.vectors] == ["t", "r", "theta", "phi"]
    d = derive(m, curvature_invariants=False)
    text_trace = trace_json(d)
    again = load_trace(text_trace)
    assert again.metric.frame == m.frame
    assert trace_json(again) == text_trace
    assert json.loads(text_trace)["metric"]["requests"]["frame"]["index"] == "down"


@pytest.mark.parametrize("table, message", [
    ('[frame]\nkind = "skew"\n[frame.vectors]\nt = { t = "1" }', "frame.kind"),
    ('[frame]\ncolour = "red"', "unknown key 'colour'"),
    ('[frame]\n[frame.vectors]\nt = { t = "1" }', "missing 'r'"),
    ('[frame]\n[frame.vectors]\nw = { t = "1" }', "not a coordinate"),
    ('[frame]\nkind = "null"\n[frame.vectors]\nn = { t = "1" }', "needs 'l'"),
    ('[frame]\nkind = "null"\n[frame.vectors]\nl = { t = ["1", "1"] }', "only m may have complex"),
    ('[frame]\nkind = "null"\n[frame.vectors]\nl = { t = "__import__" }', "frame.vectors.l.t"),
])
def test_bad_frame_tables_are_refused_with_a_message(table, message):
    base = STAR.split("[frame]")[0]
    with pytest.raises(InputError, match=message.replace("(", r"\(")):
        metric(base + table)


# -- the notebook's helpers ----------------------------------------------------------------------------------

def test_runtime_products_and_null_dust_residues():
    names = ["u", "v", "x", "y"]
    u, v, x, y = sp.symbols("u v x y", real=True)
    H = sp.Function("H")(u, x, y)
    g = sp.Matrix([[-H, -1, 0, 0], [-1, 0, 0, 0], [0, 0, 1, 0], [0, 0, 0, 1]])
    for module in (core, matter_runtime):
        module.coordinates, module.index_names = [u, v, x, y], names
        module.coordinate, module.dimension = dict(zip(names, [u, v, x, y])), 4
    core.metric.clear()
    core.inverse_metric.clear()
    inverse = g.inv()
    for i, a in enumerate(names):
        for j, b in enumerate(names):
            if g[i, j] != 0:
                core.metric[a, b] = g[i, j]
            if inverse[i, j] != 0:
                core.inverse_metric[a, b] = sp.simplify(inverse[i, j])
    vectors = {"l": {"v": sp.S.One}, "n": {"u": sp.S.One, "v": -H / 2},
               "m": {"x": 1 / sp.sqrt(2), "y": sp.I / sp.sqrt(2)}}
    products = [{"first": "l", "second": "n", "value": -1}, {"first": "m", "second": "mbar", "value": 1},
                {"first": "m", "second": "m", "value": 0}, {"first": "l", "second": "l", "value": 0}]
    residues = matter_runtime.given_products(vectors, products)
    assert all(core.vanishes(value) for value in residues.values())
    wrong = matter_runtime.given_products(vectors, [{"first": "l", "second": "n", "value": 1}])
    assert not all(core.vanishes(value) for value in wrong.values())
    # null dust along l: T_uu = f, everything else 0 (k_a = g_ab l^b = -du)
    f = sp.Function("f")(u)
    matter_runtime.stress_energy.clear()
    matter_runtime.stress_energy["u", "u"] = f
    matter_runtime.given_frame_vectors.clear()
    matter_runtime.given_frame_vectors.update(vectors)
    residues = matter_runtime.null_dust_residues("test", "l", f)
    assert all(core.vanishes(value) for value in residues.values())
    assert core.vanishes(matter_runtime.along_null_vector("n") - f)
    matter_runtime.stress_energy.clear()


@pytest.mark.slow
def test_the_notebook_rechecks_a_given_frame(tmp_path):
    from nbclient import NotebookClient
    import nbformat
    from stepper.notebook import notebook_text
    text = STAR.replace("{index}", "down").replace("{vectors}", STAR_DOWN)
    d = derive(metric(text), curvature_invariants=False)
    nb = nbformat.reads(notebook_text(load_trace(trace_json(d))), 4)
    NotebookClient(nb, timeout=600, kernel_name="python3").execute()
    printed = "".join(o.get("text", "") for c in nb.cells if c.cell_type == "code" for o in c.get("outputs", []))
    assert "frame/given/check: holds" in printed
    assert "frame: agrees with its recomputation" in printed


def test_given_null_vectors_with_a_root_factor_scale_the_null_dust_density():
    # l = sqrt 2 d_v lowers to k_a = -sqrt 2 d_a u, so T = B/(4 pi) du du = B/(8 pi) k k (by hand, with the
    # T_uu = B/(4 pi) checked independently above); n = (d_u - H/2 d_v)/sqrt 2 keeps l.n = -1
    text = PLANE_WAVE.replace("{B}", '{ of = ["u"], sign = "nonnegative" }') + '''
[frame]
kind = "null"
[frame.vectors]
l = { v = "sqrt(2)" }
n = { u = "1/sqrt(2)", v = "-H/(2*sqrt(2))" }
'''
    d = derive(metric(text), curvature_invariants=False)
    assert d.step("frame/given/check").result.holds is True
    dust = d.step("null_dust")
    assert dust.params["direction"] == "l"
    u = sp.Symbol("u", real=True)
    assert sp.simplify(dust.params["density"] - sp.Function("B")(u) / (8 * sp.pi)) == 0
    assert condition(d, "null").result.holds is True
