"""The LaTeX report, the fragment for a paper and the PDF."""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest
import sympy as sp

from conftest import example_derivation
from stepper import Metric, derive, load_metric
from stepper.exporters import (AppendixExporter, PdfExporter, ReportExporter, TexMissing, compile_latex,
                               latex_preamble)
from stepper.latex import ExpressionWriter, escape_text

EXAMPLES = Path(__file__).resolve().parent.parent / "examples"
ALL_EXAMPLES = sorted(p.stem for p in EXAMPLES.glob("*.toml"))
HAVE_TEX = shutil.which("pdflatex") is not None
needs_tex = pytest.mark.skipif(not HAVE_TEX, reason="pdflatex is not installed (.ci/run installs it)")


def derived(name: str):
    """The shared, once-per-session derivation of an example (tests/conftest.py)."""
    return example_derivation(name)


def overfull_widths(log: str) -> list[float]:
    return [float(w) for w in re.findall(r"Overfull \\hbox \(([0-9.]+)pt too wide\)", log)]


@pytest.mark.slow
@needs_tex
@pytest.mark.parametrize("name", ALL_EXAMPLES)
def test_every_example_compiles_without_overfull_lines(name):
    exporter = PdfExporter()
    pdf = exporter.export(derived(name))
    assert pdf.startswith(b"%PDF-")
    too_wide = [w for w in overfull_widths(exporter.log) if w > 1.0]
    assert too_wide == [], f"{name}: overfull boxes {too_wide}"


def test_report_lists_every_step_with_an_anchor_and_links_to_the_steps_it_used():
    d = derived("compact_star_exterior")
    tex = ReportExporter().export(d)
    for number, step in enumerate(d.steps, start=1):
        assert rf"\hypertarget{{step{number}}}{{}}\textbf{{Step {number}}}" in tex
    # The Riemann component R^t_rtr uses Christoffel steps; each appears as a link.
    riemann_number = next(n for n, s in enumerate(d.steps, 1) if s.id == "riemann/t,r,t,r")
    block = tex.split(rf"\textbf{{Step {riemann_number}}}")[1].split(r"\textbf{Step")[0]
    for used in d.step("riemann/t,r,t,r").uses:
        used_number = next(n for n, s in enumerate(d.steps, 1) if s.id == used)
        assert rf"\hyperlink{{step{used_number}}}" in block


@pytest.mark.slow
def test_abbreviations_appear_in_the_rotating_black_hole_results():
    tex = ReportExporter().export(derived("spinning_black_hole"))
    assert r"\Sigma" in tex and r"\Delta" in tex
    # Gamma^r_tt = M Delta (r^2 - a^2 cos^2) / Sigma^3 (Chandrasekhar, The Mathematical Theory of
    # Black Holes, ch. 6, from memory): the denominator is written with the abbreviation.
    assert r"\Sigma^{3}" in tex


@pytest.mark.slow
def test_same_input_gives_identical_tex_and_fragment():
    d1 = derive(load_metric(EXAMPLES / "twisted_vacuum.toml"))
    d2 = derive(load_metric(EXAMPLES / "twisted_vacuum.toml"))
    assert ReportExporter().export(d1) == ReportExporter().export(d2)
    assert AppendixExporter().export(d1) == AppendixExporter().export(d2)


@pytest.mark.slow
@needs_tex
def test_pdf_is_identical_when_built_twice():
    d = derived("round_sphere")
    assert PdfExporter().export(d) == PdfExporter().export(d)


@pytest.mark.slow
@needs_tex
def test_fragment_compiles_inside_a_minimal_article():
    fragment = AppendixExporter().export(derived("expanding_dust_universe"))
    assert r"\documentclass" not in fragment and r"\begin{document}" not in fragment
    assert fragment.startswith("% stepper:")
    document = ("\\documentclass{article}\n\\usepackage{amsmath}\n\\usepackage{hyperref}\n\\begin{document}\n"
                "\\section{Our paper}\nText.\n\\appendix\n\\input{appendix.tex}\n\\end{document}\n")
    pdf, log = compile_with_file(document, {"appendix.tex": fragment})
    assert pdf.startswith(b"%PDF-")
    assert "Undefined control sequence" not in log


def compile_with_file(document: str, files: dict[str, str]):
    import tempfile
    with tempfile.TemporaryDirectory() as folder:
        for name, text in files.items():
            (Path(folder) / name).write_text(text)
        (Path(folder) / "paper.tex").write_text(document)
        for _ in range(2):
            run = subprocess.run(["pdflatex", "-no-shell-escape", "-interaction=nonstopmode", "-halt-on-error",
                                  "paper.tex"], cwd=folder, capture_output=True, timeout=300)
            assert run.returncode == 0, (Path(folder) / "paper.log").read_text(encoding="latin-1")[-3000:]
        return (Path(folder) / "paper.pdf").read_bytes(), (Path(folder) / "paper.log").read_text(encoding="latin-1")


HOSTILE_TITLE = r"Probe \input{/etc/passwd} \write18{touch pwned} $x$ 100% #1 {oops} ~ ^ _ &"


def hostile_metric():
    t, x = sp.symbols("t x", real=True)
    return Metric.from_matrix([t, x], sp.diag(-1, 1 + t**2), title=HOSTILE_TITLE,
                              notes=r"\immediate\write18{touch pwned2} \catcode`\^=7")


def test_text_from_the_metric_is_escaped():
    tex = ReportExporter().export(derive(hostile_metric()))
    assert r"\input{/etc/passwd}" not in tex
    assert r"\write18{" not in tex
    assert r"\textbackslash{}input\{/etc/passwd\}" in tex
    assert escape_text(HOSTILE_TITLE) in tex


@pytest.mark.slow
@needs_tex
def test_hostile_title_prints_literally_and_runs_nothing(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    exporter = PdfExporter()
    pdf = exporter.export(derive(hostile_metric()))
    assert pdf.startswith(b"%PDF-")
    assert not (tmp_path / "pwned").exists() and not (tmp_path / "pwned2").exists()
    assert "(/etc/passwd" not in exporter.log  # TeX logs "(file" for every file it opens
    text = subprocess.run(["pdftotext", "-", "-"], input=pdf, capture_output=True).stdout.decode()
    assert "input{/etc/passwd}" in text.replace("\n", " ")


def test_missing_tex_engine_is_a_clear_error(monkeypatch):
    monkeypatch.setattr(shutil, "which", lambda name: None)
    with pytest.raises(TexMissing) as info:
        compile_latex("\\documentclass{article}\\begin{document}x\\end{document}")
    assert "apt-get install" in str(info.value) and "\n" not in str(info.value)


def test_preamble_is_built_with_pylatex_and_lists_the_packages():
    preamble = latex_preamble()
    for package in ("amsmath", "hyperref", "geometry"):
        assert f"{{{package}}}" in preamble


def test_long_sums_are_written_breakably():
    # TeX may break inline math after a top-level + or -; \left( ... \right) would forbid it.
    r, a, th = sp.symbols("r a theta")
    long_sum = sum(r**k * a**(6 - k) * sp.cos(th) ** k for k in range(7)) / (r**2 + a**2)
    writer = ExpressionWriter()
    tex, is_long = writer.equation("X", long_sum)
    assert is_long
    assert r"\left(" not in tex.replace(r"\left(\theta \right)", "")
    assert r"\bigl(" in tex


def test_abbreviation_matches_a_factor_and_its_negative():
    r, a, th = sp.symbols("r alpha theta")
    sigma = r**2 + a**2 * sp.cos(th) ** 2
    writer = ExpressionWriter([("Sigma", sigma)])
    assert writer.inline(1 / sigma**3) == r"\frac{1}{\Sigma^{3}}"
    assert writer.abbreviate(-r**2 - a**2 * sp.cos(th) ** 2) == -sp.Symbol("Sigma")
    # sin^2 = 1 - cos^2 is recognised (common practice).
    assert writer.abbreviate(r**2 + a**2 - a**2 * sp.sin(th) ** 2) == sp.Symbol("Sigma")


# The matter, energy conditions, ansatz and geodesic sections ---------------------------------------

NEW_SECTIONS = {
    "wormhole_passage": ["Matter required by the metric", "Energy conditions", "Geodesic equations"],
    "closed_static_universe": ["Matter required by the metric", "Energy conditions", "Geodesic equations"],
    "compact_star_exterior": ["Matter required by the metric", "Energy conditions", "Geodesic equations"],
    "exterior_from_ansatz": ["Solving the ansatz", "Geodesic equations"],
}


def section_text(tex: str, title: str) -> str:
    return tex.split(rf"\section{{{title}}}")[1].split(r"\section{")[0]


@pytest.mark.parametrize("name", sorted(NEW_SECTIONS))
def test_new_stages_have_their_own_sections_with_every_step(name):
    d = derived(name)
    tex = ReportExporter().export(d)
    for title in NEW_SECTIONS[name]:
        assert rf"\section{{{title}}}" in tex
    # Every step still has its anchor, and no result is printed as a Python value (common practice:
    # a reader should see typeset mathematics, not dictionaries or sympy's string printer).
    for number, step in enumerate(d.steps, start=1):
        assert rf"\hypertarget{{step{number}}}{{}}\textbf{{Step {number}}}" in tex
    for title in NEW_SECTIONS[name]:
        body = section_text(tex, title)
        for repr_mark in ("{'", "Derivative(", "**", "Verdict(", "u\\_r"):
            assert repr_mark not in body, (title, repr_mark)


def test_energy_conditions_are_tables_with_words_for_each_outcome():
    tex = ReportExporter().export(derived("closed_static_universe"))
    body = section_text(tex, "Energy conditions")
    assert body.count(r"\begin{tabular}") == 4
    # The closed static universe with 0 <= Lambda <= 1 and 1 <= a <= 3 (examples/closed_static_universe.toml):
    # rho + p_k = 1/(4 pi a^2) > 0 is proven from the signs; rho = (3 - Lambda a^2)/(8 pi a^2) is negative at
    # a sampled point (a^2 Lambda > 3 is inside the region); rho + sum p = Lambda/(4 pi) has an undeclared sign
    # and is only sampled (Einstein's static universe, Carroll sec. 8.3, from memory).
    assert r"\textbf{proven}" in body
    assert r"\textbf{violated}: at the point" in body
    assert "evidence, not proof" in body and r"\textbf{undecided}" in body
    assert r"\textbf{Outcome: violated}" in body and r"\textbf{Outcome: undecided}" in body


def test_frame_density_and_orbit_are_typeset():
    tex = ReportExporter().export(derived("compact_star_exterior"))
    matter = section_text(tex, "Matter required by the metric")
    assert r"e_{(r)} = " in matter and r"\partial_{r}" in matter and r"N_{(\theta)} = r^{2}" in matter
    assert r"\rho = 0" in matter
    geodesics = section_text(tex, "Geodesic equations")
    # The orbit of examples/compact_star_exterior.toml: r = 10, u_phi = 3/80, proper time up to 1000.
    # dx^a/dtau is the contravariant velocity, written with an upper index (common practice).
    assert r"r = 10" in geodesics and r"u^{\phi} = \frac{3}{80}" in geodesics and "1000" in geodesics
    assert r"\frac{du^{r}}{d\tau}" in geodesics


def test_ansatz_section_shows_reduced_equations_dependence_and_solutions():
    tex = ReportExporter().export(derived("exterior_from_ansatz"))
    body = section_text(tex, "Solving the ansatz")
    assert "Factors removed because they cannot vanish" in body
    assert r"E_{{\phi}{\phi}} = \sin^{2}{\left(\theta \right)}\," in body  # a duplicate of E_thetatheta
    assert "follows from" in body and "Independent equations" in body
    # Birkhoff's theorem (Carroll, sec. 5.2, from memory): the solution is Schwarzschild, here
    # B = r/(C1 + r) and A = C2 (1 + C1/r) with C1 = -2M.
    assert r"B = \frac{r}{r + C_{1}}" in body  # sums in descending powers of the coordinates
    summary = section_text(tex, "Summary of the results")
    assert "The solution of the ansatz" in summary and "satisfies every field equation" in summary


def test_summary_lists_the_new_verdicts_with_their_evidence():
    tex = ReportExporter().export(derived("wormhole_passage"))
    summary = section_text(tex, "Summary of the results")
    for label in ("Trace-free stress-energy", "Perfect fluid at rest in the frame", "Null energy condition",
                  "Weak energy condition", "Strong energy condition", "Dominant energy condition"):
        assert rf"\textbf{{{label}}}" in summary
    # Morris & Thorne 1988, eq. (14) (from memory): rho = -b0^2/(8 pi r^4) < 0 everywhere, so the weak
    # condition fails for every value of the parameters, not just at a sampled point.
    assert r"\(\rho \ge 0\) fails everywhere" in summary
    assert r"\rho = - \frac{b_{0}^{2}}{8 \pi r^{4}}" in summary


@pytest.mark.slow
def test_same_input_gives_identical_tex_with_matter():
    d1 = derive(load_metric(EXAMPLES / "closed_static_universe.toml"))
    d2 = derive(load_metric(EXAMPLES / "closed_static_universe.toml"))
    assert ReportExporter().export(d1) == ReportExporter().export(d2)


@pytest.mark.slow
@needs_tex
def test_fragment_with_matter_tables_compiles_inside_a_minimal_article():
    fragment = AppendixExporter().export(derived("wormhole_passage"))
    document = ("\\documentclass{article}\n\\usepackage{amsmath}\n\\usepackage{hyperref}\n\\begin{document}\n"
                "\\appendix\n\\input{appendix.tex}\n\\end{document}\n")
    pdf, log = compile_with_file(document, {"appendix.tex": fragment})
    assert pdf.startswith(b"%PDF-")
    assert "Undefined control sequence" not in log
