"""The front of the report: the metric with its signature, then the summary of results and verdicts, then a
table of contents; PDF bookmarks and visible links."""

from __future__ import annotations

import re
import shutil
import subprocess
import zlib

import pytest

from stepper.exporters import PdfExporter, ReportExporter

from conftest import example_derivation


def pdf_objects(pdf: bytes) -> bytes:
    """The PDF's bytes with every Flate-compressed stream (object streams among them) decompressed."""
    parts = [pdf]
    for match in re.finditer(rb"stream\r?\n", pdf):
        end = pdf.find(b"endstream", match.end())
        try:
            parts.append(zlib.decompress(pdf[match.end():end]))
        except zlib.error:
            pass
    return b"".join(parts)


def test_the_summary_comes_before_the_steps_and_the_contents_after_it():
    tex = ReportExporter().export(example_derivation("compact_star_exterior"))
    order = [tex.index(marker) for marker in (r"\section{The metric}", r"\section{Summary of the results}",
                                              r"\tableofcontents", r"\section{Conventions}", "Step 1")]
    assert order == sorted(order)


@pytest.mark.parametrize(("stem", "words"), [
    # de Sitter in flat slicing, -dt^2 + exp(2Ht) dx^2: Lorentzian (common practice)
    ("inflating_universe", r"Signature: \((-,+,+,+)\), Lorentzian"),
    ("hyperbolic_plane", r"Signature: \((+,+)\), Riemannian"),
    ("compact_star_exterior", "Signature: not fixed by the declared signs"),
])
def test_the_signature_is_stated(stem, words):
    assert words in ReportExporter().export(example_derivation(stem))


@pytest.mark.skipif(shutil.which("pdflatex") is None or shutil.which("pdftotext") is None,
                    reason="pdflatex or pdftotext is missing")
def test_page_one_holds_the_results_and_the_pdf_has_bookmarks(tmp_path):
    pdf = PdfExporter().export(example_derivation("inflating_universe"))
    assert b"/Outlines" in pdf_objects(pdf)  # hyperref's bookmarks, in the document catalog
    (tmp_path / "report.pdf").write_bytes(pdf)
    first = subprocess.run(["pdftotext", "-f", "1", "-l", "1", "report.pdf", "-"], cwd=tmp_path,
                           capture_output=True, text=True, check=True).stdout
    for words in ("Summary of the results", "Signature", "Ricci-flat", "Numeric verification"):
        assert words in first, words


def test_results_are_numbered_equations_with_stable_unique_labels():
    derivation = example_derivation("compact_star_exterior")
    tex = ReportExporter().export(derivation)
    labels = re.findall(r"\\label\{([^}]*)\}", tex)
    assert len(labels) == len(set(labels)) > 20
    assert "eq:metric.1" in labels and "eq:summary.1" in labels and "eq:step3.1" in labels
    assert ReportExporter().export(derivation) == tex  # the same labels on every run


def test_the_audit_difference_does_not_take_a_name_the_metric_uses():
    # The seminar's metric has no Delta, but the rotating black hole's does (common practice: Delta =
    # r^2 - 2Mr + a^2 in Boyer-Lindquist form); the audit's difference is written out in words instead.
    tex = ReportExporter().export(example_derivation("seminar_notes"))
    assert r"\text{claimed} - \text{correct} = " in tex
    assert r"\Delta = " not in tex
