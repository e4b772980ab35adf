"""Plots (stepper.plots): the metric file's [[plot]] request, the plotted values against closed forms from the
literature, vector and deterministic PDF figures, and the report and notebook that show them."""

from __future__ import annotations

import math
import subprocess
import sys

import pytest
import sympy as sp

from conftest import EXAMPLES, ROOT, example_derivation
from stepper.errors import InputError
from stepper.metricfile import load_metric, metric_from_data
from stepper.outputs import is_output_name
from stepper.plots import figure_pdf, plots, report_plots
from stepper.record import PlotRequest
from stepper.trace import load_trace, trace_json

SCHWARZSCHILD = {
    "coordinates": ["t", "r", "theta", "phi"],
    "line_element": "-(1 - 2*M/r)*dt^2 + dr^2/(1 - 2*M/r) + r^2*dtheta^2 + r^2*sin(theta)^2*dphi^2",
    "symbols": {"M": "positive", "r": "positive"},
}


def with_plot(**plot) -> dict:
    return {**SCHWARZSCHILD, "plot": [{"quantity": "kretschmann", "along": "r", "range": ["3", "10"],
                                       "values": {"M": "1"}, **plot}]}


# --------------------------------------------------------------------------
# Reading the request
# --------------------------------------------------------------------------

def test_a_plot_request_is_read_exactly():
    metric = metric_from_data(with_plot(quantity=["scalar", "kretschmann"], range=["5/2", "pi"],
                                        values={"M": "1/3", "theta": "pi/2"}))
    (request,) = metric.plots
    assert request.quantities == ("scalar", "kretschmann")
    assert request.along.name == "r"
    assert (request.low, request.high) == (sp.Rational(5, 2), sp.pi)
    assert [(s.name, v) for s, v in request.values] == [("M", sp.Rational(1, 3)), ("theta", sp.pi / 2)]
    assert request.shade == ""


@pytest.mark.parametrize("change, message", [
    ({"quantity": "riemann"}, "cannot plot 'riemann'; choose from determinant, scalar, kretschmann, energy_density, pressure"),
    ({"quantity": "energy_density"}, "energy_density needs a [matter] table"),
    ({"along": "x"}, "'along' must be one of the coordinates"),
    ({"range": ["3"]}, "'range' must be a pair"),
    ({"range": ["10", "3"]}, "is not below the high end"),
    ({"range": ["3", "2**10000"]}, "too large"),
    ({"values": {}}, "values is missing 'M'"),
    ({"values": {"M": "1", "r": "2"}}, "'r' is not one of"),
    ({"values": {"M": "x"}}, ""),
    ({"values": {"M": "0.1*r"}}, ""),
    ({"shade": "null"}, "'shade' needs a [matter] table"),
    ({"shade": "strongest"}, "'shade' must be one of null, weak, strong, dominant"),
    ({"colour": "red"}, "unknown key 'colour' in [plot 1]"),
])
def test_bad_plot_requests_are_refused_in_one_line(change, message):
    with pytest.raises(InputError) as caught:
        metric_from_data(with_plot(**change))
    assert message in caught.value.message and "\n" not in caught.value.message


def test_plot_must_be_an_array_of_tables_and_the_metric_without_free_functions():
    with pytest.raises(InputError, match="array of tables"):
        metric_from_data({**SCHWARZSCHILD, "plot": {"quantity": "scalar"}})
    free = {"coordinates": ["t", "r"], "line_element": "-A(r)*dt^2 + dr^2", "functions": {"A": ["r"]},
            "plot": [{"quantity": "scalar", "along": "r", "range": ["1", "2"]}]}
    with pytest.raises(InputError, match="without free functions"):
        metric_from_data(free)
    with pytest.raises(InputError, match="at most 12"):
        metric_from_data({**SCHWARZSCHILD, "plot": with_plot()["plot"] * 13})


def test_the_request_survives_the_trace():
    derivation = example_derivation("spinning_black_hole")
    loaded = load_trace(trace_json(derivation))
    assert loaded.metric.plots == derivation.metric.plots
    assert loaded.metric.plots == (PlotRequest(("kretschmann",), sp.Symbol("r", positive=True), sp.Integer(2),
                                               sp.Integer(12), ((sp.Symbol("M", positive=True), sp.Integer(1)),
                                                                (sp.Symbol("alpha", positive=True), sp.Rational(7, 10)),
                                                                (sp.Symbol("theta", real=True), sp.pi / 2))),)


def test_plot_file_names_are_output_names():
    assert is_output_name("plot-1-kretschmann.pdf") and is_output_name("plot-2-energy-density-pressure.pdf")
    assert not is_output_name("plot-1-.pdf") and not is_output_name("plot-1-../x.pdf")


# --------------------------------------------------------------------------
# The plotted values against closed forms
# --------------------------------------------------------------------------

def kerr_kretschmann(M, a, r, theta):
    """K = 48 M^2 (r^6 - 15 r^4 a^2 c^2 + 15 r^2 a^4 c^4 - a^6 c^6) / (r^2 + a^2 c^2)^6, c = cos(theta):
    Henry, "Kretschmann scalar for a Kerr-Newman black hole", ApJ 535 (2000) 350, with Q = 0 (also from memory)."""
    c2 = math.cos(theta) ** 2
    return (48 * M**2 * (r**6 - 15 * r**4 * a**2 * c2 + 15 * r**2 * a**4 * c2**2 - a**6 * c2**3)
            / (r**2 + a**2 * c2) ** 6)


def _kerr_plot(theta: str):
    """The example's derivation with the example's request at another angle."""
    import dataclasses
    derivation = example_derivation("spinning_black_hole")
    metric = derivation.metric
    symbols = {s.name: s for s in metric.coordinates + metric.parameters}
    request = PlotRequest(("kretschmann",), symbols["r"], sp.Integer(2), sp.Integer(12),
                          ((symbols["M"], sp.Integer(1)), (symbols["alpha"], sp.Rational(7, 10)),
                           (symbols["theta"], _angle(theta))))
    return dataclasses.replace(derivation, metric=dataclasses.replace(metric, plots=(request,)))


def _angle(text: str):
    return {"pi/2": sp.pi / 2, "pi/3": sp.pi / 3}[text]


@pytest.mark.slow
@pytest.mark.parametrize("theta", ["pi/2", "pi/3"])
def test_kerr_kretschmann_points_agree_with_the_closed_form(theta):
    derivation = _kerr_plot(theta)
    (plot,) = plots(derivation)
    assert plot.drawn and len(plot.curves) == 1 and len(plot.x) == 201
    angle = float(_angle(theta))
    for x, value in zip(plot.x, plot.curves[0].values):
        assert value == pytest.approx(kerr_kretschmann(1.0, 0.7, x, angle), rel=1e-12)


def test_the_example_kretschmann_plot_is_the_equatorial_closed_form():
    """In the equatorial plane the closed form above is 48 M^2 / r^6 (from memory), whatever the spin."""
    (plot,) = plots(example_derivation("spinning_black_hole"))
    assert plot.x[0] == 2.0 and plot.x[-1] == 12.0
    for x, value in zip(plot.x, plot.curves[0].values):
        assert value == pytest.approx(48 / x**6, rel=1e-12)
        assert value == pytest.approx(kerr_kretschmann(1.0, 0.7, x, math.pi / 2), rel=1e-12)
    assert plot.logarithmic  # 0.75 down to 1.6e-5


def test_wormhole_default_plot_agrees_with_morris_thorne():
    """Morris & Thorne, Am. J. Phys. 56 (1988) 395, the field equations of their static wormhole (eqs. 14,
    from memory): rho = b'/(8 pi r^2), tau = [b/r - 2 (r - b) Phi']/(8 pi r^2) (the radial tension, p_r = -tau),
    p = (r/2) [(rho - tau) Phi' - tau'] - tau; geometric units.  For b = b0^2/r, Phi = 0 these give
    rho = -b0^2/(8 pi r^4), p_r = -b0^2/(8 pi r^4) and p = +b0^2/(8 pi r^4)."""
    (plot,) = plots(example_derivation("wormhole_passage"))
    assert plot.default and plot.quantities == ("energy_density", "pressure")
    assert plot.along.name == "r" and (plot.low, plot.high) == (2, 10)
    values = {s.name: v for s, v in plot.values}
    assert values == {"b0": sp.Rational(3, 2), "theta": sp.Rational(31, 20)}  # the midpoints of the region
    b0 = 1.5
    r, b0_, phi = sp.symbols("r b0 Phi")
    b = b0_**2 / r
    rho = sp.diff(b, r) / (8 * sp.pi * r**2)
    tau = (b / r - 2 * (r - b) * 0) / (8 * sp.pi * r**2)
    p = r / 2 * ((rho - tau) * 0 - sp.diff(tau, r)) - tau
    expected = [rho, -tau, p, p]
    assert [c.tex for c in plot.curves] == [r"\rho", "p_{(r)}", r"p_{(\theta)}", r"p_{(\phi)}"]
    for curve, formula in zip(plot.curves, expected):
        for x, value in zip(plot.x, curve.values):
            assert value == pytest.approx(float(formula.subs({b0_: b0, r: x})), rel=1e-12)
    # rho + p_r = -b0^2/(4 pi r^4) < 0 everywhere: the null energy condition fails on the whole range.
    assert plot.shade == "null" and all(plot.failing)


def test_shading_follows_the_inequalities_where_they_change_sign():
    """A static metric whose energy density changes sign inside the range: the shaded points are those where a
    recorded inequality of the weak condition is negative, evaluated here independently with sympy's N.
    For -f dt^2 + dr^2/f + r^2 dOmega^2, rho = (1 - (r f)')/(8 pi r^2) (from memory), here proportional to
    r^2 (3/100 - 4 r/1000): negative above r = 15/2, so the weak condition fails on part of [1, 10]."""
    data = {"coordinates": ["t", "r", "theta", "phi"],
            "line_element": ("-(1 - r^2/100 + r^3/1000)*dt^2 + dr^2/(1 - r^2/100 + r^3/1000) + r^2*dtheta^2 "
                             "+ r^2*sin(theta)^2*dphi^2"),
            "symbols": {"r": "positive"}, "matter": {"region": {"r": ["1", "10"], "theta": ["1", "2"]}},
            "plot": [{"quantity": ["energy_density", "pressure"], "along": "r", "range": ["1", "10"],
                      "shade": "weak"}]}
    from stepper.chain import derive
    derivation = derive(metric_from_data(data))
    (plot,) = plots(derivation)
    assert plot.drawn and plot.shade == "weak"
    rows = derivation.results["energy_conditions"]["weak"]["inequalities"]
    expected = [False] * len(plot.points)
    for row in rows.values():
        numbers = [float(sp.N(row["value"].subs(plot.along, point), 30)) for point in plot.points]
        scale = max(abs(v) for v in numbers)
        expected = [e or v < -1e-12 * scale for e, v in zip(expected, numbers)]
    assert list(plot.failing) == expected
    assert 0 < sum(plot.failing) < len(plot.failing)  # it fails on part of the range only
    assert plot.failing[-1] and not plot.failing[0]


def test_a_plot_that_cannot_be_drawn_says_why():
    derivation = example_derivation("spinning_black_hole")
    import dataclasses
    metric = derivation.metric
    symbols = {s.name: s for s in metric.coordinates + metric.parameters}
    request = PlotRequest(("kretschmann",), symbols["r"], sp.Integer(2), sp.Integer(12),
                          ((symbols["M"], sp.Integer(1)), (symbols["alpha"], sp.Rational(7, 10))))
    changed = dataclasses.replace(derivation, metric=dataclasses.replace(metric, plots=(request,)))
    (entry,) = report_plots(changed)
    assert not entry["drawn"]
    assert "not drawn, because its value still depends on theta" in entry["caption"]


# --------------------------------------------------------------------------
# The figure: vector, deterministic, captioned in LaTeX
# --------------------------------------------------------------------------

def test_the_figure_is_vector_and_the_same_bytes_every_time():
    (plot,) = plots(example_derivation("wormhole_passage"))
    first, second = figure_pdf(plot), figure_pdf(plot)
    assert first.startswith(b"%PDF") and first == second
    assert b"/Subtype /Image" not in first  # no raster image anywhere
    assert b"CreationDate" not in first and b"ModDate" not in first


def test_captions_are_latex_with_the_values():
    (entry,) = report_plots(example_derivation("spinning_black_hole"))
    caption = entry["caption"]
    assert r"\(\alpha = \frac{7}{10}\)" in caption and r"\(\theta = \frac{\pi}{2}\)" in caption
    assert "**" not in caption and "sqrt(" not in caption and "alpha" not in caption.replace(r"\alpha", "")
    (entry,) = report_plots(example_derivation("wormhole_passage"))
    assert "null energy condition" in entry["caption"] and "over the whole range" in entry["caption"]


def test_vacuum_with_a_matter_region_gets_no_default_plot():
    """compact_star_exterior is the vacuum outside a star: rho and every pressure vanish, nothing to draw."""
    assert plots(example_derivation("compact_star_exterior")) == []


# --------------------------------------------------------------------------
# Whole runs: the report includes the figure, the notebook draws it (slow)
# --------------------------------------------------------------------------

def _derive(stem: str, out) -> None:
    run = subprocess.run([sys.executable, "-m", "stepper", "derive", str(EXAMPLES / f"{stem}.toml"), "-o", str(out),
                          "--quiet"], cwd=ROOT, capture_output=True, text=True, timeout=900)
    assert run.returncode == 0, run.stderr


@pytest.mark.slow
@pytest.mark.parametrize("stem, name", [("wormhole_passage", "plot-1-energy-density-pressure.pdf"),
                                        ("spinning_black_hole", "plot-1-kretschmann.pdf")])
def test_the_report_includes_the_figure_and_render_makes_the_same_bytes(stem, name, tmp_path):
    import shutil
    if shutil.which("pdflatex") is None:
        pytest.skip("no pdflatex")
    _derive(stem, tmp_path / "a")
    assert (tmp_path / "a" / name).is_file()
    for tex in ("report.tex", "appendix.tex"):
        assert f"\\includegraphics[width=\\linewidth]{{{name}}}" in (tmp_path / "a" / tex).read_text()
    text = subprocess.run(["pdftotext", str(tmp_path / "a" / "report.pdf"), "-"], capture_output=True,
                          text=True).stdout
    assert "Plots" in text and "Plot 1." in text
    # pdfTeX embeds the figure as a form XObject: the report holds its vector drawing, no raster image.
    assert b"/Subtype /Form" in (tmp_path / "a" / "report.pdf").read_bytes()
    render = subprocess.run([sys.executable, "-m", "stepper", "render", str(tmp_path / "a" / "trace.json"), "-o",
                             str(tmp_path / "b"), "--quiet"], cwd=ROOT, capture_output=True, text=True, timeout=900)
    assert render.returncode == 0, render.stderr
    for file in sorted((tmp_path / "a").iterdir()):
        assert file.read_bytes() == (tmp_path / "b" / file.name).read_bytes(), file.name


@pytest.mark.slow
@pytest.mark.parametrize("stem", ["wormhole_passage", "spinning_black_hole"])
def test_the_notebook_recomputes_and_draws_the_plot(stem):
    import nbformat
    from nbclient import NotebookClient
    from stepper.notebook import notebook_text
    nb = nbformat.reads(notebook_text(example_derivation(stem)), as_version=4)
    NotebookClient(nb, timeout=900, kernel_name="python3").execute()
    (cell,) = [c for c in nb.cells if c.cell_type == "code" and "def check_plot" in c.source]
    printed = "".join(o.get("text", "") for o in cell.outputs)
    assert "plot 1: 201 points of" in printed and "agree with the values stepper drew" in printed
    assert any("image/svg+xml" in o.get("data", {}) for o in cell.outputs)


# --------------------------------------------------------------------------
# The orbit of [orbit]: the recorded geodesic equations integrated with RK4 in mpmath
# --------------------------------------------------------------------------

def _orbit():
    from stepper.plots import orbit_plot
    orbit = orbit_plot(example_derivation("compact_star_exterior"))
    assert orbit is not None and orbit.drawn, orbit and orbit.problem
    return orbit


def _schwarzschild(r, theta, ut, ur, utheta, uphi, M=1.0):
    """g_ab u^a u^b, E = -g_tb u^b = (1 - 2M/r) u^t and L = g_phi b u^b = r^2 sin^2(theta) u^phi for
    Schwarzschild, written out here (Carroll, Spacetime and Geometry, sec. 5.4, from memory)."""
    f = 1 - 2 * M / r
    s2 = math.sin(theta) ** 2
    norm = -f * ut**2 + ur**2 / f + r**2 * utheta**2 + r**2 * s2 * uphi**2
    return norm, f * ut, r**2 * s2 * uphi


def test_the_orbit_plot_exists_for_the_example():
    from stepper.plots import plot_files
    derivation = example_derivation("compact_star_exterior")
    orbit = _orbit()
    assert orbit.file_name == "plot-1-orbit.pdf" and is_output_name(orbit.file_name)
    assert orbit.plane == ("polar", "r", "phi")
    assert orbit.steps == 2000 and len(orbit.x) == len(orbit.path) == 2001 and orbit.reached == 1000.0
    assert orbit.time_rate == sp.sqrt(365) / 16  # u^t = sqrt((1 + r^2 u_phi^2) / (1 - 2M/r)) at r = 10, by hand
    assert list(plot_files(derivation)) == ["plot-1-orbit.pdf"]
    (entry,) = report_plots(derivation)
    assert entry["drawn"] and entry["file"] == "plot-1-orbit.pdf"
    # The drawn points are r cos(phi), r sin(phi) of the integrated path.
    for (tau, x, u), px, py in list(zip(orbit.path, orbit.x, orbit.y))[::100]:
        assert px == pytest.approx(x[1] * math.cos(x[3]), abs=1e-12)
        assert py == pytest.approx(x[1] * math.sin(x[3]), abs=1e-12)


def test_the_orbit_figure_is_vector_and_the_same_bytes_every_time():
    import stepper.plots as module
    orbit = _orbit()
    first = module.orbit_pdf(orbit)
    assert first.startswith(b"%PDF") and b"/Subtype /Image" not in first
    assert b"CreationDate" not in first and b"ModDate" not in first
    # A second integration from the trace as loaded back gives the same numbers and the same bytes.
    again = module.orbit_plot(load_trace(trace_json(example_derivation("compact_star_exterior"))))
    assert again is not orbit and again.path == orbit.path
    assert module.orbit_pdf(again) == first


def test_the_integrated_orbit_conserves_the_norm_energy_and_angular_momentum():
    """The exact equations keep g_ab u^a u^b = -1, E and L fixed (Carroll sec. 5.4, from memory); RK4 with 2000
    steps in 20 digits keeps them to far better than the tolerance stated here, 1e-9 (relative for E and L)."""
    orbit = _orbit()
    _, x0, u0 = orbit.path[0]
    norm0, energy0, momentum0 = _schwarzschild(x0[1], x0[2], *u0)
    assert norm0 == pytest.approx(-1, abs=1e-15)
    assert energy0 == pytest.approx(0.8 * math.sqrt(365) / 16, rel=1e-15) and momentum0 == pytest.approx(3.75)
    for tau, x, u in orbit.path:
        norm, energy, momentum = _schwarzschild(x[1], x[2], *u)
        assert norm == pytest.approx(-1, abs=1e-9)
        assert energy == pytest.approx(energy0, rel=1e-9) and momentum == pytest.approx(momentum0, rel=1e-9)
        assert x[2] == pytest.approx(math.pi / 2, abs=1e-12)  # equatorial stays equatorial
    assert 0 <= orbit.drift < 1e-9


def test_the_orbit_stays_between_the_turning_points_of_the_effective_potential():
    """Carroll sec. 5.4 (from memory): (dr/dtau)^2/2 + V(r) = E^2/2, V = 1/2 - M/r + L^2/(2r^2) - M L^2/r^3.
    Turning points are the roots of E^2/2 - V(r) = 0, i.e. of (E^2 - 1)/2 r^3 + M r^2 - L^2/2 r + M L^2 = 0;
    the start r = 10 with dr/dtau = 0 is one; the orbit must stay between it and the next root below, and (over
    tau = 1000, several radial periods) come close to that root."""
    import numpy as np
    M, r0, uphi = 1.0, 10.0, 3 / 80
    L = r0**2 * uphi
    E = (1 - 2 * M / r0) * math.sqrt((1 + r0**2 * uphi**2) / (1 - 2 * M / r0))
    roots = sorted(z.real for z in np.roots([(E**2 - 1) / 2, M, -L**2 / 2, M * L**2]) if abs(z.imag) < 1e-9)
    assert roots[-1] == pytest.approx(r0, rel=1e-9)
    inner = roots[-2]
    assert 9 < inner < r0  # a slightly eccentric bound orbit (L is a little below the circular 10/sqrt(7))
    radii = [x[1] for _, x, _ in _orbit().path]
    assert min(radii) >= inner - 1e-7 and max(radii) <= r0 + 1e-7
    assert min(radii) == pytest.approx(inner, abs=1e-3)


def test_the_orbit_caption_is_typeset_with_what_was_done():
    from stepper.plots import orbit_caption
    derivation = example_derivation("compact_star_exterior")
    text = orbit_caption(derivation, _orbit())
    for part in (r"\(M = 1\)", r"\(r = 10\)", r"\(\theta = \frac{\pi}{2}\)", r"\(d\phi/d\tau = \frac{3}{80}\)",
                 r"\(dt/d\tau = \frac{\sqrt{365}}{16}\)", r"\(g_{ab} u^a u^b = -1\)", r"from \(0\) to \(1000\)",
                 "Runge--Kutta", "2000 equal steps", "20-digit", "numeric integration", "not an exact result"):
        assert part in text, part
    assert r"drifts by at most \(" in text and r"\times 10^{-" in text
    assert "**" not in text and "sqrt(" not in text and "pi/2" not in text and "u_phi" not in text


def test_an_orbit_out_of_the_equatorial_plane_is_drawn_as_two_coordinates():
    from stepper.plots import _plane
    names = ["t", "r", "theta", "phi"]
    assert _plane(names, "t", {"theta": sp.pi / 2}, {"theta": 0}) == ("polar", "r", "phi")
    assert _plane(names, "t", {"theta": sp.pi / 3}, {"theta": 0}) == ("pair", "r", "theta")
    assert _plane(names, "t", {"theta": sp.pi / 2}, {"theta": sp.Rational(1, 10)}) == ("pair", "r", "theta")
    assert _plane(["t", "x", "y", "z"], "t", {}, {}) == ("pair", "x", "y")


@pytest.mark.slow
def test_the_report_shows_the_orbit(tmp_path):
    import shutil
    if shutil.which("pdflatex") is None:
        pytest.skip("no pdflatex")
    _derive("compact_star_exterior", tmp_path)
    assert (tmp_path / "plot-1-orbit.pdf").is_file()
    assert "\\includegraphics[width=0.62\\linewidth]{plot-1-orbit.pdf}" in (tmp_path / "report.tex").read_text()
    text = subprocess.run(["pdftotext", str(tmp_path / "report.pdf"), "-"], capture_output=True, text=True).stdout
    assert "Plot 1." in text and "Runge" in text


@pytest.mark.slow
def test_the_notebook_draws_the_orbit_and_agrees_with_the_end_point():
    import nbformat
    from nbclient import NotebookClient
    from stepper.notebook import notebook_text
    nb = nbformat.reads(notebook_text(example_derivation("compact_star_exterior")), as_version=4)
    NotebookClient(nb, timeout=900, kernel_name="python3").execute()
    (cell,) = [c for c in nb.cells if c.cell_type == "code" and "def check_orbit_plot" in c.source]
    printed = "".join(o.get("text", "") for o in cell.outputs)
    assert "the end point agrees with stepper's within 1e-06" in printed
    assert any("image/svg+xml" in o.get("data", {}) for o in cell.outputs)
