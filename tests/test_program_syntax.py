"""No program syntax in typeset text: every example's PDF, read back as text, is scanned for what a
program prints and a referee would send back (powers written **, sympy's Derivative( and sqrt(, arrows
->, internal step ids and keys, e-notation numbers).  The trace keeps the plain-text forms; the PDF is
typeset from the record's data."""

from __future__ import annotations

import functools
import re
import shutil
import subprocess

import pytest

from conftest import CLAIM_STEMS, EXAMPLE_STEMS, example_derivation

from stepper.exporters import PdfExporter
from stepper.report import _Model

#: What program text looks like once pdftotext has read it back, with a name for the failure message.
PROGRAM_SYNTAX = {
    "a power written **": re.compile(r"\*\*"),
    "a product written *": re.compile(r"[\w)]\s?\*\s?[\w(]"),
    "sympy's Derivative(": re.compile(r"Derivative\("),
    "a call like sqrt(": re.compile(r"\b(sqrt|Abs|Subs|Function|Symbol|Integer|Rational)\("),
    "an arrow ->": re.compile(r"->"),
    "!= for not equal": re.compile(r"!="),
    "an empty call ()": re.compile(r"\w\(\)"),
    "a caret from plain text": re.compile(r"\^|\u02c6"),
    "an underscore from plain text": re.compile(r"_"),
    "an internal step id": re.compile(r"\b(verdict|position|claim|energy_conditions|ricci|riemann|christoffel|"
                                      r"inverse_metric|ansatz|frame|contracted_christoffel|numeric_verification|"
                                      r"weyl|einstein)/\w"),
    "a component key": re.compile(r"\b(theta|phi|chi|psi|[a-z]),(theta|phi|chi|psi|[a-z])(,|\b)"),
    "an e-notation number": re.compile(r"\b\d(\.\d+)?e[-+]?\d+\b"),
    "a Python value": re.compile(r"\{'|'\}|\[\]|\{\}"),
}


def program_syntax(text: str) -> list[str]:
    """Each line of ``text`` holding program syntax, with what was found."""
    found = []
    for number, line in enumerate(text.splitlines(), start=1):
        for name, pattern in PROGRAM_SYNTAX.items():
            match = pattern.search(line)
            if match:
                found.append(f"line {number}: {name} ({match.group()!r}) in {line.strip()[:120]!r}")
    return found


def test_the_scan_finds_what_it_is_for():
    # the scan must be able to fail: each kind of program text it looks for is found
    samples = ["R_t,t is not zero: it equals -2*b0**2/(r**2)", "Derivative(A(r), r)", "t -> t / sqrt(|C2|)",
               "Step 5 (inverse_metric/check)", "tolerance 1e-15", "sympy cancel()", "keyed 'k:i,j'",
               "b != c", "g^ik g_kj"]
    for sample in samples:
        assert program_syntax(sample), sample
    assert not program_syntax("the trace vanishes (its canonical rational form is 0); k = 1/r2, t, r, θ")


def test_evidence_strings_of_the_model_are_typeset(derived):
    # quick version of the PDF scan: the report model's evidence and statements hold no program text
    model = _Model(derived("wormhole_passage"))
    for step in derived("wormhole_passage").steps:
        if hasattr(step.result, "holds"):
            evidence = model.verdict_evidence(step)
            assert "**" not in evidence and "Derivative(" not in evidence, evidence
            assert "_" not in re.sub(r"\\\(.*?\\\)", "", evidence), evidence  # underscores only inside math


@functools.lru_cache(maxsize=None)
def example_pdf(stem: str) -> bytes:
    return PdfExporter().export(example_derivation(stem))


def pdf_text(stem: str, tmp_path, *pages: str) -> str:
    pdf = tmp_path / f"{stem}.pdf"
    pdf.write_bytes(example_pdf(stem))
    return subprocess.run(["pdftotext", *pages, "-layout", str(pdf), "-"], capture_output=True, text=True,
                          check=True).stdout


@pytest.mark.slow
@pytest.mark.skipif(shutil.which("pdflatex") is None or shutil.which("pdftotext") is None,
                    reason="needs pdflatex and pdftotext")
@pytest.mark.parametrize("stem", EXAMPLE_STEMS + CLAIM_STEMS)
def test_no_program_syntax_in_any_example_pdf(stem, tmp_path):
    found = program_syntax(pdf_text(stem, tmp_path))
    assert not found, "\n".join(found[:20])


@pytest.mark.slow
@pytest.mark.skipif(shutil.which("pdflatex") is None or shutil.which("pdftotext") is None,
                    reason="needs pdflatex and pdftotext")
@pytest.mark.parametrize("stem", EXAMPLE_STEMS + CLAIM_STEMS)
def test_page_one_shows_signature_conventions_results_and_verdicts(stem, tmp_path):
    page = pdf_text(stem, tmp_path, "-f", "1", "-l", "1")
    assert "Signature" in page
    assert "Conventions" in page and "round sphere has R > 0" in page.replace("\n", " ")
    assert "Summary of the results" in page
    assert re.search(r"\bR = ", page), "the scalar curvature is on page one"
    assert re.search(r"(holds|does not hold|undecided) \(step \d+\)", page), "a verdict with its step is on page one"
