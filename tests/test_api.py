"""The Python interface (stepper/api.py, stepper/display.py, Metric.from_matrix's requests).

Physics checked here, each from memory (standard results of differential geometry and relativity):
the 2-sphere of radius a has R_ij = g_ij / a^2, so R_thetatheta = 1, R_phiphi = sin^2 theta, scalar
curvature R = 2/a^2 and constant sectional curvature k = 1/a^2; the exterior Schwarzschild metric is a
vacuum solution (T_ij = 0); a static, spherically symmetric vacuum is Ricci-flat (Birkhoff); the wormhole
throat with b(r) = b0^2/r breaks the null energy condition (Morris & Thorne, Am. J. Phys. 56, 395 (1988)).
"""

from __future__ import annotations

import subprocess
import sys
import textwrap
from pathlib import Path

import pytest
import sympy as sp

import stepper
from conftest import example_derivation
from stepper import AnsatzRequest, FrameRequest, InputError, MatterRequest, Metric, OrbitRequest, PlotRequest
from stepper import cli

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"

theta, phi = sp.symbols("theta phi", real=True)
a = sp.Symbol("a", positive=True)
t, r = sp.symbols("t r", real=True)
M = sp.Symbol("M", positive=True)


@pytest.fixture(scope="module")
def sphere():
    metric = Metric.from_matrix([theta, phi], sp.diag(a**2, a**2 * sp.sin(theta)**2), title="Sphere of radius a")
    return stepper.derive(metric)


def schwarzschild_matrix():
    f = 1 - 2 * M / r
    return sp.diag(-f, 1 / f, r**2, r**2 * sp.sin(theta)**2)


def balanced(tex: str) -> bool:
    depth, position = 0, 0
    while position < len(tex):
        if tex[position] == "\\":
            position += 2
            continue
        depth += {"{": 1, "}": -1}.get(tex[position], 0)
        if depth < 0:
            return False
        position += 1
    return depth == 0


# ---------------------------------------------------------------------------
# derive, quantities, verdicts and their display
# ---------------------------------------------------------------------------

def test_the_sphere_of_radius_a(sphere):
    ricci = sphere.quantity("ricci")
    # from memory: R_ij = g_ij / a^2 on the sphere of radius a
    assert sp.simplify(ricci["theta,theta"] - 1) == 0
    assert sp.simplify(ricci[("phi", "phi")] - sp.sin(theta)**2) == 0
    assert ricci[(theta, phi)] == 0  # not listed: vanishes
    with pytest.raises(KeyError):
        ricci["theta,r"]
    scalar = sphere.quantity("scalar")
    assert sp.simplify(scalar[""] - 2 / a**2) == 0  # from memory: R = 2/a^2
    assert r"R = \frac{2}{a^{2}}" in scalar._repr_latex_()
    tex = ricci._repr_latex_()
    assert tex.startswith("$$") and tex.endswith("$$") and balanced(tex)
    assert r"R_{{\theta}{\theta}} = 1" in tex


def test_verdicts_display_their_evidence_from_the_step(sphere):
    constant = sphere.verdict("constant_curvature")
    assert constant.holds is True
    assert r"k = \frac{1}{a^{2}}" in constant._repr_latex_()  # from memory: sectional curvature 1/a^2
    flat = sphere.verdict("ricci_flat")
    assert flat.holds is False
    assert r"\neq 0" in flat._repr_latex_() and r"\textbf{does not hold}" in flat._repr_latex_()
    whole = sphere._repr_latex_()
    assert r"R = \frac{2}{a^{2}}" in whole and balanced(whole)
    assert r"\text{Constant curvature: }\textbf{holds}" in whole
    step = sphere.step("ricci/theta,theta")
    assert step._repr_latex_().count(r"R_{{\theta}{\theta}}") >= 2  # the substituted formula and the result
    assert balanced(sphere.show_step("christoffel/theta,phi,phi")._repr_latex_())
    assert r"\textbf{does not hold}" in sphere.step("verdict/ricci_flat").result._repr_latex_()


def test_unknown_quantities_and_verdicts_are_one_line_errors(sphere):
    with pytest.raises(InputError, match="unknown quantity 'nope'; the derivation holds metric"):
        sphere.quantity("nope")
    with pytest.raises(InputError, match="no stress-energy tensor"):
        sphere.quantity("stress_energy")
    with pytest.raises(InputError, match="no verdict 'nope'"):
        sphere.verdict("nope")


def test_energy_condition_verdict_of_the_wormhole(derived):
    d = derived("wormhole_passage")
    null = d.verdict("null")
    assert null.holds is False  # Morris & Thorne 1988: the throat breaks the null energy condition
    tex = null._repr_latex_()
    assert r"\textbf{violated}" in tex and r"\ge 0" in tex and balanced(tex)


def test_text_from_the_input_cannot_break_the_display():
    title = r"Moon \input{secret} }{ $x$ & 50% #1 ^_~ end"
    d = stepper.derive(Metric.from_matrix([theta, phi], sp.diag(a**2, a**2 * sp.sin(theta)**2), title=title))
    tex = d._repr_latex_()
    assert balanced(tex)
    assert r"\input" not in tex and "$x$" not in tex
    assert r"\backslash\text{input}\{\text{secret}\}" in tex


def test_derive_accepts_a_path_and_refuses_other_things():
    d = stepper.derive(EXAMPLES / "round_sphere.toml")
    assert "ricci" in d.results
    with pytest.raises(InputError, match="derive needs a stepper.Metric or the path of a metric file, not int"):
        stepper.derive(42)
    with pytest.raises(InputError):
        stepper.derive(EXAMPLES / "no_such_metric.toml")


# ---------------------------------------------------------------------------
# audit
# ---------------------------------------------------------------------------

def test_audit_of_claims_given_in_python(sphere):
    checked = stepper.audit(sphere, [{"quantity": "scalar", "value": "2/a^2"},
                                     {"quantity": "ricci", "component": "theta,theta", "value": "2"}])
    rows = checked.results["audit"]["claims"]
    assert [row["outcome"] for row in rows] == ["agrees", "differs"]
    assert "audit" not in sphere.results  # the old derivation is unchanged
    tex = checked.verdict(2)._repr_latex_()
    assert r"\text{correct: }R_{{\theta}{\theta}} = 1" in tex and r"\textbf{differs}" in tex
    assert r"\text{Audit: 1 of 2 claims agree" in checked._repr_latex_()
    with pytest.raises(InputError, match="claim 1: quantity must be one of"):
        stepper.audit(sphere, [{"quantity": "nonsense", "value": "1"}])
    with pytest.raises(InputError, match="claim 1 must be a table"):
        stepper.audit(sphere, [3])


def test_audit_of_a_claims_file_checks_it_is_about_the_same_metric(sphere):
    claims = EXAMPLES / "claims" / "seminar_notes.toml"
    with pytest.raises(InputError, match="seminar_notes.toml is about the metric"):
        stepper.audit(sphere, claims)
    metric = stepper.load_metric(EXAMPLES / "compact_star_exterior.toml")
    checked = stepper.audit(stepper.derive(metric), claims)
    command_line = example_derivation("seminar_notes")  # as `stepper audit` makes it
    assert checked.results["audit"] == command_line.results["audit"]


# ---------------------------------------------------------------------------
# render and load_trace
# ---------------------------------------------------------------------------

def test_render_writes_the_bytes_the_command_line_writes(sphere, tmp_path):
    written = stepper.render(sphere, tmp_path / "api", formats=["trace", "tex", "notebook"])
    assert sorted(p.name for p in written) == ["derivation.ipynb", "report.tex", "trace.json"]
    status = cli.main(["render", str(tmp_path / "api" / "trace.json"), "-o", str(tmp_path / "cli"),
                       "--formats", "trace,tex,notebook", "--quiet"])
    assert status == 0
    for path in written:
        assert path.read_bytes() == (tmp_path / "cli" / path.name).read_bytes(), path.name
    again = stepper.load_trace(tmp_path / "api" / "trace.json")
    assert again.step("ricci/theta,theta").result == sphere.step("ricci/theta,theta").result
    # rendering a trace path into its own folder keeps the rest of its set, as `stepper render` does
    stepper.render(tmp_path / "api" / "trace.json", tmp_path / "api", formats="tex")
    assert sorted(p.name for p in (tmp_path / "api").iterdir()) == ["derivation.ipynb", "report.tex", "trace.json"]


def test_render_replaces_the_output_set_whole(sphere, tmp_path):
    folder = tmp_path / "out"
    stepper.render(sphere, folder, formats="trace,notebook")
    stepper.render(sphere, folder, formats="trace")
    assert [p.name for p in folder.iterdir()] == ["trace.json"]  # the previous set was replaced in one step
    (folder / "mine.txt").write_text("not stepper's")
    with pytest.raises(InputError):
        stepper.render(sphere, folder, formats="trace")
    assert (folder / "trace.json").is_file()


def test_render_and_load_errors_are_the_command_lines(sphere, tmp_path):
    with pytest.raises(InputError, match="unknown output format 'html'"):
        stepper.render(sphere, tmp_path / "x", formats="html")
    with pytest.raises(InputError, match="--anchor-prefix may hold only"):
        stepper.render(sphere, tmp_path / "x", formats="appendix", anchor_prefix="a b")
    with pytest.raises(InputError, match="detail must be one of summary, condensed, full"):
        stepper.render(sphere, tmp_path / "x", detail="everything")
    with pytest.raises(InputError, match="no such trace file"):
        stepper.load_trace(tmp_path / "missing.json")
    (tmp_path / "bad.json").write_text('{"format": "something else"}')
    with pytest.raises(InputError, match="not a stepper trace"):
        stepper.load_trace(tmp_path / "bad.json")
    assert not (tmp_path / "x").exists()


# ---------------------------------------------------------------------------
# Metric.from_matrix with the metric file's requests
# ---------------------------------------------------------------------------

def test_matter_and_frame_requests_from_python():
    f = 1 - 2 * M / r
    frame = FrameRequest(kind="orthonormal", vectors=(("t", (1 / sp.sqrt(f), 0, 0, 0)), ("r", (0, sp.sqrt(f), 0, 0)),
                                                      ("theta", (0, 0, 1 / r, 0)),
                                                      ("phi", (0, 0, 0, 1 / (r * sp.sin(theta))))))
    metric = Metric.from_matrix([t, r, theta, phi], schwarzschild_matrix(), title="Exterior",
                                matter=MatterRequest(time=t, region=((r, 3, 20), (M, 1, 1))), frame=frame)
    assert metric.frame.kind == "orthonormal" and metric.matter.region[0] == (r, 3, 20)
    d = stepper.derive(metric)
    assert all(sp.simplify(v) == 0 for v in d.results["stress_energy"].values())  # vacuum (from memory)


def test_ansatz_request_from_python():
    A, B = sp.Function("A")(r), sp.Function("B")(r)
    metric = Metric.from_matrix([t, r, theta, phi], sp.diag(-A, B, r**2, r**2 * sp.sin(theta)**2),
                                ansatz=AnsatzRequest(unknowns=(A, sp.Function("B"))))
    assert metric.ansatz.unknowns == (A, B)
    d = stepper.derive(metric)
    # Birkhoff (from memory): the static, spherically symmetric vacuum is Schwarzschild, Ricci-flat
    assert d.results["ansatz"]["properties"]["einstein_constant"] == 0


def _file_error(tmp_path: Path, tables: str) -> str:
    path = tmp_path / "m.toml"
    path.write_text(textwrap.dedent('''\
        coordinates = ["t", "r", "theta", "phi"]
        line_element = "-(1 - 2*M/r)*dt^2 + dr^2/(1 - 2*M/r) + r^2*dtheta^2 + r^2*sin(theta)^2*dphi^2"
        [symbols]
        M = "positive"
        ''') + textwrap.dedent(tables))
    with pytest.raises(InputError) as caught:
        stepper.load_metric(path)
    return caught.value.message


def _python_error(**requests) -> str:
    with pytest.raises(InputError) as caught:
        Metric.from_matrix([t, r, theta, phi], schwarzschild_matrix(), **requests)
    return caught.value.message


@pytest.mark.parametrize("case", ["region", "units", "time", "constant", "orbit", "plot", "plot values", "frame"])
def test_bad_requests_give_the_metric_files_messages(case, tmp_path):
    tables, requests = {
        "region": ('[matter]\n[matter.region]\nr = ["20", "3"]\n',
                   dict(matter=MatterRequest(time=t, region=((r, 20, 3),)))),
        "units": ('[matter]\nunits = "cgs"\n', dict(matter=MatterRequest(time=t, units="cgs"))),
        "time": ('[matter]\ntime = "x"\n', dict(matter=MatterRequest(time=sp.Symbol("x", real=True)))),
        "constant": ('[matter]\ncosmological_constant = "r"\n', dict(matter=MatterRequest(time=t, cosmological_constant=r))),
        "orbit": ('[orbit]\nstart = { t = "0", r = "10", theta = "1", phi = "0" }\n'
                  'velocity = { r = "0", theta = "0", phi = "0" }\n',
                  dict(orbit=OrbitRequest(time=t, kind="timelike", values=(),
                                          start=((t, 0), (r, 10), (theta, 1), (phi, 0)),
                                          velocity=((r, 0), (theta, 0), (phi, 0)), span=100))),
        "plot": ('[[plot]]\nquantity = "nothing"\nalong = "r"\nrange = ["3", "12"]\n',
                 dict(plots=[PlotRequest(quantities=("nothing",), along=r, low=3, high=12)])),
        "plot values": ('[[plot]]\nquantity = "kretschmann"\nalong = "r"\nrange = ["3", "12"]\n',
                        dict(plots=[PlotRequest(quantities=("kretschmann",), along=r, low=3, high=12)])),
        "frame": ('[frame]\nkind = "skew"\n[frame.vectors]\nt = { t = "1" }\n',
                  dict(frame=FrameRequest(kind="skew", vectors=(("t", (1, 0, 0, 0)),)))),
    }[case]
    assert _python_error(**requests) == _file_error(tmp_path, tables)


def test_requests_must_be_exact_records():
    assert "must be a stepper.MatterRequest" in _python_error(matter={"time": "t"})
    assert "use sympy.Rational" in _python_error(matter=MatterRequest(time=t, region=((r, 0.5, 3),)))
    assert "not text" in _python_error(matter=MatterRequest(time=t, cosmological_constant="Lambda"))


@pytest.mark.slow
def test_import_stepper_is_light():
    code = "import sys, stepper; assert 'sympy' not in sys.modules and 'stepper.chain' not in sys.modules; " \
           "from stepper import derive, Metric; import stepper.chain"
    proc = subprocess.run([sys.executable, "-c", code], cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stderr
