"""The audit section of the report is typeset from the record's data: the claim's symbol and words, the slip
the audit names, the zero test of the difference; never program text (the claim as written, its syntax,
the quantity and component keys, sympy's printing) -- those stay in trace.json."""

from __future__ import annotations

import re
import shutil
import subprocess

import pytest
import sympy as sp

from conftest import example_derivation, example_trace
from stepper.audit import record_audit, audit
from stepper.claims import read_claim
from stepper.exporters import PdfExporter, ReportExporter
from stepper.latex import escape_text
from stepper.report import _Model, report_model
from stepper.trace import load_trace

CLAIM_EXAMPLES = ("seminar_notes", "wormhole_homework")

#: Program text that must not reach the typeset audit: sympy's and Python's syntax, keys of the record.
PROGRAM_TEXT = re.compile(r"\*|Derivative\(|sqrt\(|->|!=|\(\)|_|\^|\\texttt|\b[a-z]+,[a-z]+\b|"
                          r"stress.energy.mixed|einstein.mixed|christoffel|riemann|frame.ricci")


def text_outside_math(tex: str) -> str:
    """The words of a LaTeX fragment: what is left when every inline formula \\( ... \\) is taken out."""
    return re.sub(r"\\\(.*?\\\)", " ", tex, flags=re.S)


def audit_rows(stem: str) -> dict[int, dict]:
    """The report's audit rows of an example, made from the trace as loaded back (as the command line does)."""
    model = report_model(load_trace(example_trace(stem)))
    return {row["number"]: row for row in model["audit"]["claims"]}


def claim_params(stem: str) -> dict[int, dict]:
    d = load_trace(example_trace(stem))
    return {s.params["number"]: s.params for s in d.steps if s.kind == "claim"}


@pytest.mark.parametrize("stem", CLAIM_EXAMPLES)
def test_the_audit_rows_hold_no_program_text(stem):
    for number, row in audit_rows(stem).items():
        for key in ("words", "diagnosis", "evidence", "outcome"):
            words = text_outside_math(row[key])
            assert not PROGRAM_TEXT.search(words), (number, key, row[key])
        assert "syntax" not in row and "text" not in row


@pytest.mark.parametrize("stem", CLAIM_EXAMPLES)
def test_the_audit_section_of_report_tex_drops_the_claims_as_written(stem):
    tex = ReportExporter().export(load_trace(example_trace(stem)))
    section = tex[tex.index(r"{Audit: "):tex.index("{Checks that were run}")]
    assert r"\texttt" not in section
    for params in claim_params(stem).values():
        # the claim as written (plain or LaTeX syntax) stays in trace.json; the typeset value shows it
        assert params["text"] not in section
        assert f"({params['syntax']})" not in section
    assert '"text"' in example_trace(stem) and '"syntax"' in example_trace(stem)


@pytest.mark.parametrize("stem", CLAIM_EXAMPLES)
def test_every_differing_claim_has_its_slip_as_data_and_typeset(stem):
    params = claim_params(stem)
    rows = audit_rows(stem)
    model = _Model(load_trace(example_trace(stem)))
    for number, p in params.items():
        if p["outcome"] == "differs":
            assert callable(getattr(model, f"slip_{p['slip']['kind']}", None)), number
            assert rows[number]["diagnosis"] == model.slip_tex(p["slip"], rows[number]["symbol"]) != "", number
        else:
            assert "slip" not in p


def test_the_seminar_notes_slips_are_typeset():
    # Schwarzschild: Gamma^r_rr = -M/(r(r - 2M)), R^t_rtr = 2M/(r^2(r - 2M)), Gamma^theta_r theta = 1/r,
    # Gamma^r_theta theta = -(r - 2M), R_tt = 0 (Carroll, Spacetime and Geometry, sec. 5.2, from memory).
    rows, params = audit_rows("seminar_notes"), claim_params("seminar_notes")
    assert params[4]["slip"] == {"kind": "sign_flip", "hint": ""}  # Christoffel symbols: no convention to blame
    assert "the claim is minus the correct value" in rows[4]["diagnosis"]
    assert params[5]["slip"]["kind"] == "factor" and params[5]["slip"]["ratio"] == sp.Rational(1, 2)
    assert "half the correct value" in rows[5]["diagnosis"] and r"\tfrac12" in rows[5]["diagnosis"]
    assert params[7]["slip"] == {"kind": "swapped_indices", "quantity": "christoffel", "positions": "",
                                 "component": "theta,r,theta", "other": "r,theta,theta"}
    assert r"\Gamma^{{r}}_{{\theta}{\theta}}" in rows[7]["diagnosis"]
    assert r"\Gamma^{{\theta}}_{{r}{\theta}}" in rows[7]["diagnosis"]
    assert params[8]["slip"] == {"kind": "correct_is_zero"}
    assert r"the correct value is \(0\)" in rows[8]["diagnosis"]


def test_the_wormhole_homework_slips_are_typeset():
    # Morris & Thorne, Am. J. Phys. 56, 395 (1988), eq. (14) (from memory), for b = b0^2/r: the radial
    # pressure is the tension -b0^2/(8 pi r^4), the lateral pressure +b0^2/(8 pi r^4); T = G/(8 pi).
    rows, params = audit_rows("wormhole_homework"), claim_params("wormhole_homework")
    assert params[3]["slip"] == {"kind": "sign_flip", "hint": "tension"}
    assert r"\(\tau = -p\)" in rows[3]["diagnosis"] and "minus the correct value" in rows[3]["diagnosis"]
    slip = params[4]["slip"]
    assert slip["kind"] == "kappa_missing" and slip["lambda"] is False and slip["kappa"] == 8 * sp.pi
    assert slip["einstein"] == {"positions": "dd", "component": "t,t"}
    assert r"\(1/(8\pi)\)" in rows[4]["diagnosis"] and r"G_{{t}{t}}" in rows[4]["diagnosis"]
    assert r"T_{{t}{t}} = \frac{1}{8\pi}" in rows[4]["diagnosis"]
    for n in (7, 8):  # G_rr and T^rr with their signs flipped
        assert params[n]["slip"] == {"kind": "sign_flip", "hint": "curvature_sign"}
        assert "opposite sign convention for the Riemann or Ricci tensor" in rows[n]["diagnosis"]
    assert params[11]["slip"] == {"kind": "cross_terms_once", "direction": "phi", "sign_lost": False}
    assert r"\Gamma^{\phi}_{bc}" in rows[11]["diagnosis"] and r"b \ne c" in rows[11]["diagnosis"]


def test_the_zero_test_of_each_difference_is_data_and_its_words_come_from_it():
    params, rows = claim_params("seminar_notes"), audit_rows("seminar_notes")
    # the exact field decides claims 1 to 9 (rational functions of r, M and sin, cos)
    for n in (1, 4, 5, 7):
        assert params[n]["test"]["how"] == "canonical form"
        assert "canonical rational form" in rows[n]["evidence"]
    assert params[1]["test"]["vanishes"] is True and params[4]["test"]["vanishes"] is False
    # claim 11 needs the identity rewrites: the half angle is decided by the sum formulas
    assert params[11]["zero_test"]["vanishes"] is True and "common angles" in params[11]["zero_test"]["rewrites"]
    assert r"\(\sin(a + b) =" in rows[11]["evidence"]
    # claim 12 (a nested root): sampled, not proven
    test = params[12]["test"]
    assert test["how"] == "sampled" and test["vanishes"] is None
    assert f"{test['points']} random points to {test['digits']} digits" in rows[12]["evidence"]
    assert "cancel()" not in rows[12]["evidence"] and "simplify()" not in rows[12]["evidence"]
    # an unreadable claim says why from its recorded problem
    assert params[10]["outcome"] == "unreadable" and params[10]["problem"]
    assert rows[10]["evidence"].startswith("the claimed value could not be read")


def test_the_claim_is_named_by_its_symbol_and_the_registry_words():
    rows = audit_rows("wormhole_homework")
    assert rows[6]["symbol"] == "T^{{r}}{}_{{r}}"
    assert rows[6]["words"] == escape_text("stress-energy tensor with the first index up")
    assert rows[8]["words"] == escape_text("stress-energy tensor with both indices up")
    assert rows[2]["words"] == "pressure" and rows[1]["words"] == "energy density"


def test_the_lambda_slips_of_the_static_universe_are_typeset():
    # Einstein's static universe (Carroll, sec. 8.3, from memory): G + Lambda g = 8 pi T with
    # 8 pi rho = 3/a^2 - Lambda; G_tt = 3/a^2 (T_tt = rho with g_tt = -1).
    d = example_derivation("closed_static_universe")
    entries = [{"quantity": "stress_energy", "component": "t,t", "value": "3/a^2"},          # G_tt alone
               {"quantity": "stress_energy", "component": "t,t", "value": "3/(8*pi*a^2)"},   # Lambda lost
               {"quantity": "pressure", "component": "theta", "value": "Lambda - 1/a^2"},    # 1/(8 pi) lost
               {"quantity": "energy_density", "value": "(3/a^2 - Lambda)/(64*pi^2)"}]        # 8 pi twice
    claims = [read_claim(n, e, d.metric, None) for n, e in enumerate(entries, start=1)]
    verdicts, earliest = audit(d, claims)
    recorded = load_trace(example_trace_of(record_audit(d, "static", verdicts, earliest)))
    rows = {row["number"]: row for row in report_model(recorded)["audit"]["claims"]}
    kinds = [v.slip.get("kind") for v in verdicts]
    assert kinds == ["einstein_only", "lambda_missing", "kappa_missing", "kappa_twice"]
    assert r"\Lambda\,g_{{t}{t}}" in rows[1]["diagnosis"] and r"G_{{t}{t}}" in rows[1]["diagnosis"]
    assert r"\left(G_{{t}{t}} + \Lambda\,g_{{t}{t}}\right)" in rows[2]["diagnosis"]
    assert verdicts[2].slip["lambda"] is True and verdicts[2].slip["einstein"]["positions"] == "ff"
    assert (r"\(p_{(\theta)} = \frac{1}{8\pi}\left(G_{{(\theta)}{(\theta)}} + \Lambda\,\eta_{{(\theta)}{(\theta)}}\right)\)"
            in rows[3]["diagnosis"])
    assert r"divided by \(8\pi\) once too often" in rows[4]["diagnosis"]
    for row in rows.values():
        assert not PROGRAM_TEXT.search(text_outside_math(row["diagnosis"])), row["diagnosis"]


def example_trace_of(derivation) -> str:
    from stepper.trace import trace_json
    return trace_json(derivation)


def test_the_ansatz_solution_claims_are_typeset_from_their_data():
    # Schwarzschild exterior by Birkhoff (Carroll, sec. 5.2, from memory): B = 1/(1 - 2M/r), A = 1 - 2M/r;
    # A = 1 + 2M/r needs the constant of claim 1 with the other sign.
    d = example_derivation("exterior_from_ansatz")
    entries = [{"quantity": "ansatz_solution", "component": "B", "value": "1/(1 - 2*M/r)"},
               {"quantity": "ansatz_solution", "component": "A", "value": "1 + 2*M/r"}]
    claims = [read_claim(n, e, d.metric, None, ("M",)) for n, e in enumerate(entries, start=1)]
    verdicts, earliest = audit(d, claims)
    recorded = load_trace(example_trace_of(record_audit(d, "ansatz", verdicts, earliest)))
    rows = {row["number"]: row for row in report_model(recorded)["audit"]["claims"]}
    assert rows[1]["agrees"] and rows[1]["symbol"] == "B"
    assert r"the claim is the recorded general solution with \(C_{1} = - 2 M\)" in rows[1]["evidence"]
    (name, value, number), = verdicts[1].solution["fixed"]  # C1 = -2M fixed by claim 1
    assert (name, number) == ("C1", 1) and sp.simplify(value + 2 * value.free_symbols.pop()) == 0
    assert "contradict an earlier claim" in rows[2]["diagnosis"]
    assert r"(with \(C_{1} = - 2 M\) from claim 1)" in rows[2]["diagnosis"]
    for row in rows.values():
        for key in ("diagnosis", "evidence"):
            assert not PROGRAM_TEXT.search(text_outside_math(row[key])), (key, row[key])


@pytest.mark.parametrize("kind, slip", [
    ("claim_is_zero", {"kind": "claim_is_zero"}),
    ("none", {"kind": "none"}),
    ("factor", {"kind": "factor", "ratio": sp.Integer(-2)}),
    ("factor", {"kind": "factor", "ratio": sp.Rational(3, 2)}),
    ("factor", {"kind": "factor", "ratio": sp.Symbol("M", positive=True)}),
    ("other_direction", {"kind": "other_direction", "quantity": "pressure", "component": "theta", "direction": "r"}),
    ("density_for_pressure", {"kind": "density_for_pressure", "component": "r"}),
    ("cross_terms_once", {"kind": "cross_terms_once", "direction": "t", "sign_lost": True}),
    ("kappa_twice", {"kind": "kappa_twice", "kappa": 8 * sp.pi * sp.Symbol("G"),
                     "einstein": {"positions": "ud", "component": "t,t"}}),
])
def test_every_kind_of_slip_has_a_printer(kind, slip):
    model = _Model(example_derivation("wormhole_passage"))
    tex = model.slip_tex(slip, "T")
    assert tex and not PROGRAM_TEXT.search(text_outside_math(tex)), tex
    assert callable(getattr(model, f"slip_{kind}"))


# ------------------------------------------------------------------ the PDF itself

AUDIT_SECTION = re.compile(r"Audit: .*?(?=Checks that were run)", re.S)


@pytest.mark.slow
@pytest.mark.skipif(shutil.which("pdflatex") is None or shutil.which("pdftotext") is None,
                    reason="needs pdflatex and pdftotext")
@pytest.mark.parametrize("stem", CLAIM_EXAMPLES)
def test_the_audit_pages_of_the_pdf_show_no_program_syntax(stem):
    pdf = PdfExporter().export(load_trace(example_trace(stem)))
    text = subprocess.run(["pdftotext", "-layout", "-", "-"], input=pdf, capture_output=True, check=True).stdout
    sections = AUDIT_SECTION.findall(text.decode("utf-8"))
    section = sections[-1]  # the table of contents names the section first
    assert "Claim 1" in section and "Evidence:" in section
    for pattern in (r"\*", r"_[a-z]", r"\^", r"\b[a-z]+,[a-z]+\b", r"\(\)", "!=", "->", r"sqrt\(", r"Derivative\(",
                    "cancel", "stress_energy", "Claimed \\("):
        found = re.search(pattern, section)
        assert found is None, (pattern, section[max(0, found.start() - 80):found.end() + 80])
