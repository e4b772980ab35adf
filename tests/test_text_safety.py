"""Realistic text from a metric or claims file never breaks a report and never turns into markup.

Titles, notes and claim labels carry Greek letters, mathematical symbols, accented names, stray control
characters (a terminal colour code, a bell), emoji and CJK.  The PDF must still compile and show that text
(checked with pdftotext), TeX's errors must be reported in plain words, and in the notebook the same text
must render as literal Markdown text: no link, image, heading or math that the input did not ask stepper for.
"""

from __future__ import annotations

import html
import re
import shutil
import subprocess
import unicodedata
from pathlib import Path

import nbformat
import pytest
import sympy as sp

from stepper import derive, load_metric
from stepper.exporters import PdfExporter, TexFailed, compile_latex, latex_preamble, tex_error
from stepper.latex import escape_text, pdf_string
from stepper.latex_input import parse_latex
from stepper.notebook import notebook_text
from stepper.parse import Vocabulary

HAVE_TEX = shutil.which("pdflatex") is not None and shutil.which("pdftotext") is not None
needs_tex = pytest.mark.skipif(not HAVE_TEX, reason="pdflatex or pdftotext is not installed (.ci/run installs them)")

TITLE = "Λ-vacuum with α = 1/2 and −1"
NOTES = ("Greek αβγδεζηθικλμνξοπρςστυφχψω ΑΒΓΔΕΖΗΘΙΚΛΜΝΞΟΠΡΣΤΥΦΧΨΩ ϑϕϖϱϵ ά; "
         "a Schrödinger-like façade in Łódź; "
         "symbols − ± × · ÷ ≤ ≥ ≠ ≈ ∞ ∂ ∇ → ⇒ ∈ ∑ ∫ √ ° ′ ⊗ ∧ ℓ ħ, r² and g₁₂; "
         "quotes “so-called” ‘gauge’ – dash — and … ellipsis; "
         "a terminal colour \x1b[31mred\x1b[0m, a bell \x07, zero-width\u200b and bidi \u202eoverride\u202c; "
         "an emoji 😀 and CJK 時空")

CONTROLS = (["\x00", "\x07", "\x1b", "\x7f", "\x85", "\x9b", "\ufeff"]
            + [chr(c) for c in range(0x200B, 0x2010)] + [chr(c) for c in range(0x202A, 0x202F)]
            + [chr(c) for c in range(0x2066, 0x206A)])


def toml_string(text: str) -> str:
    """A TOML basic string holding ``text`` exactly: quotes, backslashes and unprintable characters escaped."""
    return '"' + "".join(c if c.isprintable() and c not in '"\\' else f"\\u{ord(c):04X}" for c in text) + '"'


def sphere_file(folder: Path, title: str, notes: str = "") -> Path:
    path = folder / "sphere.toml"
    path.write_text(
        f"title = {toml_string(title)}\nnotes = {toml_string(notes)}\n"
        'coordinates = ["theta", "phi"]\nline_element = "rho^2*dtheta^2 + rho^2*sin(theta)^2*dphi^2"\n'
        '[symbols]\nrho = "positive"\ntheta = "positive"\n', encoding="utf-8")
    return path


def pdf_text(pdf: bytes) -> str:
    """The text of a PDF as pdftotext reads it, blanks run together and in compatibility form (NFKC): the fonts
    name some glyphs after look-alike characters, Ω as the ohm sign U+2126 and ħ as U+210F."""
    run = subprocess.run(["pdftotext", "-enc", "UTF-8", "-", "-"], input=pdf, capture_output=True, check=True)
    return unicodedata.normalize("NFKC", " ".join(run.stdout.decode("utf-8").split()))


def overfull_widths(log: str) -> list[float]:
    return [float(w) for w in re.findall(r"Overfull \\hbox \(([0-9.]+)pt too wide\)", log)]


# ---------------------------------------------------------------- LaTeX for free text


@pytest.mark.parametrize(("text", "tex"), [
    ("Λ", r"\ensuremath{\Lambda}"), ("α", r"\ensuremath{\alpha}"), ("ς", r"\ensuremath{\varsigma}"),
    ("ϑ", r"\ensuremath{\vartheta}"), ("Ω", r"\ensuremath{\Omega}"), ("Α", r"\ensuremath{\mathrm{A}}"),
    ("−1", r"\ensuremath{-}1"), ("±", r"\ensuremath{\pm}"), ("×", r"\ensuremath{\times}"),
    ("≤", r"\ensuremath{\le}"), ("∞", r"\ensuremath{\infty}"), ("∂", r"\ensuremath{\partial}"),
    ("ħ", r"\ensuremath{\hbar}"), ("ℓ", r"\ensuremath{\ell}"), ("r²", r"r\ensuremath{^{2}}"),
    ("g₁", r"g\ensuremath{_{1}}"), ("façade", "façade"), ("Łódź", "Łódź"), ("a – b", "a – b"),
    ("a\u00a0b", "a~b"), ("😀", r"\texttt{[U+1F600]}\allowbreak{}"), ("時", r"\texttt{[U+6642]}\allowbreak{}"),
    ("e\u0301", "é"),  # a combining accent is composed first
    (r"\input{x} 100% #1 $", r"\textbackslash{}input\{x\} 100\% \#1 \$"),
])
def test_free_text_becomes_latex_that_prints_it(text, tex):
    assert escape_text(text) == tex


@pytest.mark.parametrize("control", CONTROLS, ids=[f"U+{ord(c):04X}" for c in CONTROLS])
def test_control_and_invisible_characters_are_removed(control):
    assert escape_text(f"a{control}b") == "ab"
    assert pdf_string(f"a{control}b") == "ab"


def test_a_long_run_without_blanks_may_break_and_words_may_not():
    assert r"\allowbreak" in escape_text("x" * 400)
    assert r"\allowbreak" not in escape_text("energy_conditions/dominant Schwarzschild-like")


def test_the_pdf_title_keeps_the_characters():
    assert pdf_string(TITLE) == "Λ{-}vacuum with α = 1/2 and −1"


# ---------------------------------------------------------------- the LaTeX claim reader


def test_the_claim_reader_reads_unicode_minus_and_multiplication_signs():
    M, r = sp.symbols("M r", positive=True)
    vocabulary = Vocabulary({"M": M, "r": r})
    assert parse_latex("\\frac{M(r\u22122M)}{r^{3}}", vocabulary, "claim") == M * (r - 2 * M) / r**3
    assert parse_latex("M\u2212\u2212r", vocabulary, "claim") == M + r
    assert parse_latex("\u2212r^{\u22121}", vocabulary, "claim") == -1 / r
    assert parse_latex("2\u00d7M \u00b7 r \u22c5 r", vocabulary, "claim") == 2 * M * r**2
    with pytest.raises(Exception, match=r"unknown command '\\input'"):
        parse_latex("\u2212\\input{/etc/passwd}", vocabulary, "claim")


# ---------------------------------------------------------------- TeX's errors in plain words


def test_a_tex_error_names_its_line_and_says_what_a_dimension_error_means():
    log = ("This is pdfTeX\n"
           "Overfull \\hbox (1621.5pt too wide) in paragraph at lines 40--40\n"
           "! Dimension too large.\n<recently read> \\dimen@\n\n"
           "l.42 \\hspace{20000pt}\n\nl.57 later context\n")
    message = tex_error(log)
    assert message.startswith("! Dimension too large.")
    assert "line 42 of report.tex" in message and "57" not in message
    assert "far too long" in message and "1 overfull line" in message
    assert tex_error("no error here\n") == "unknown TeX error (no error line in the log)"


@needs_tex
@pytest.mark.slow
def test_a_failing_run_reports_the_first_error_and_reads_the_log_as_utf8():
    body = "façade \\undefinedcommand\n"
    source = f"\\documentclass{{article}}\n{latex_preamble()}\n\\begin{{document}}\n{body}\\end{{document}}\n"
    line = source.splitlines().index(body.strip()) + 1
    with pytest.raises(TexFailed) as failure:
        compile_latex(source)
    assert str(failure.value) == f"pdflatex failed: ! Undefined control sequence. (on line {line} of report.tex)"
    assert f"l.{line} façade" in failure.value.log


@needs_tex
@pytest.mark.slow
def test_a_dimension_too_large_is_said_plainly():
    source = f"\\documentclass{{article}}\n{latex_preamble()}\n\\begin{{document}}\nx\\hspace{{20000pt}}x\n\\end{{document}}\n"
    with pytest.raises(TexFailed, match="Dimension too large.*far too long to set"):
        compile_latex(source)


# ---------------------------------------------------------------- real PDFs


@needs_tex
@pytest.mark.slow
def test_unicode_title_and_notes_typeset_in_the_pdf(tmp_path):
    exporter = PdfExporter()
    pdf = exporter.export(derive(load_metric(sphere_file(tmp_path, TITLE, NOTES))))
    assert pdf.startswith(b"%PDF-")
    text = pdf_text(pdf)
    assert "Λ-vacuum with α = 1/2 and −1" in text
    # capitals that look like Latin letters are set as those letters: Λ Μ Ν Ξ prints as ΛMNΞ
    for piece in ("Schrödinger-like façade in Łódź", "αβγδεζηθ", "ΛMNΞ", "ΨΩ", "∞", "∂", "→", "ħ",
                  "“so-called”", "red", "bell", "override", "[U+1F600]", "[U+6642][U+7A7A]"):
        assert piece in text, piece
    assert "\x1b" not in text and "\x07" not in text and "\u202e" not in text
    info = subprocess.run(["pdfinfo", "-enc", "UTF-8", "-"], input=pdf, capture_output=True).stdout.decode("utf-8")
    assert re.search(r"^Title: +(.*)$", info, re.MULTILINE).group(1) == TITLE
    assert [w for w in overfull_widths(exporter.log) if w > 1.0] == []


@needs_tex
@pytest.mark.slow
def test_a_title_of_400_characters_without_spaces_fits_the_page(tmp_path):
    title = ("Λ-vacuum" + "abcdefghijklmnopqrstuvwxyz" * 20)[:400]
    exporter = PdfExporter()
    pdf = exporter.export(derive(load_metric(sphere_file(tmp_path, title, title))))
    assert pdf.startswith(b"%PDF-")
    assert "abcdefghijklmnopqrstuvwxyz"[:8] in pdf_text(pdf)
    assert [w for w in overfull_widths(exporter.log) if w > 1.0] == []


@needs_tex
@pytest.mark.slow
def test_every_character_compiles():
    """Every character of the Basic Multilingual Plane outside the large CJK and Hangul blocks, samples of those
    and of the higher planes: pdflatex compiles what escape_text makes of them, 64 to a line."""
    codes = [c for c in range(0x30000) if not (0xD800 <= c < 0xE000 or 0x3400 <= c < 0xA000
                                              or 0xAC00 <= c < 0xD7A4 or c >= 0x20000 or 0x10000 <= c < 0x1F000)]
    codes += [0x4E00, 0x6642, 0x9FFF, 0xAC00, 0x1F600, 0x1F9FF, 0x20000, 0x2FFFF, 0xE0001, 0x10FFFF]
    text = "".join(map(chr, codes))
    lines = [escape_text(text[i:i + 64]) for i in range(0, len(text), 64)]
    source = (f"\\documentclass{{article}}\n{latex_preamble()}\n\\begin{{document}}\n\\raggedright\n"
              + "\\par\n".join(lines) + "\n\\end{document}\n")
    pdf, log = compile_latex(source)
    assert pdf.startswith(b"%PDF-")
    assert "Missing character" not in log
    assert [w for w in overfull_widths(log) if w > 1.0] == []


@needs_tex
@pytest.mark.slow
def test_an_audit_with_a_unicode_minus_and_a_long_label_makes_a_pdf(tmp_path, capsys):
    from stepper.cli import main
    sphere_file(tmp_path, TITLE, NOTES)
    label = "notes-p.-1:" + "Γ^θ_φφ-copied-from-the-blackboard" * 9
    claims = tmp_path / "claims.toml"
    claims.write_text(
        f'metric = "sphere.toml"\ntitle = {toml_string("Checking “Λ-vacuum” notes — 時空")}\n'
        f"[[claim]]\nlabel = {toml_string(label)}\nquantity = \"christoffel\"\ncomponent = \"theta,phi,phi\"\n"
        "latex = '\u2212\\sin\\theta\\cos\\theta'\n"
        "[[claim]]\nlabel = \"the scalar, with a multiplication sign\"\nquantity = \"scalar\"\n"
        "latex = '2\u00d7\\frac{1}{\\rho^2}'\n", encoding="utf-8")
    out = tmp_path / "out"
    status = main(["audit", str(claims), "-o", str(out), "--quiet", "--formats", "trace,pdf"])
    assert status == 0, capsys.readouterr()
    text = pdf_text((out / "report.pdf").read_bytes())
    assert "2 of 2 claims agree" in text
    assert "Checking “Λ-vacuum” notes — [U+6642][U+7A7A]" in text
    # the claim as written stays in trace.json; the PDF shows it typeset
    assert "claimed:Γθφφ=−sin(θ)cos(θ)" in text.replace(" ", ""), text[:3000]


# ---------------------------------------------------------------- Markdown in the notebook

PAYLOADS = ["![x](http://host/beacon.png)", "[click](javascript:alert(1))", "<http://host/auto>",
            "https://host/bare", "www.host.example", "someone@host.example", "<img src=x onerror=alert(1)>",
            "*em* __strong__ ~~struck~~ `code`", "$x^2$ and $$y$$", "\\(z\\) \\[w\\] \\begin{equation}v\\end{equation}",
            "| a | b |", "[^1] [ref]: http://host/ref", "&lt;b&gt;"]
LINE_STARTS = ["# Injected", "---", "- item", "+ item", "1. item", "> quote", "    indented code", "===",
               "| a | b |", "|---|---|", "```", "~~~"]
MD_TITLE = "Λ-vacuum " + " ".join(PAYLOADS)
MD_NOTES = "\n".join(LINE_STARTS + PAYLOADS)


def title_cell(tmp_path) -> str:
    nb = nbformat.reads(notebook_text(derive(load_metric(sphere_file(tmp_path, MD_TITLE, MD_NOTES)))), as_version=4)
    return nb.cells[0].source


def payload_lines(source: str) -> list[str]:
    """The lines of the title cell that came from the title and the notes: up to stepper's own first sentence."""
    lines = source.splitlines()
    return lines[:next(i for i, line in enumerate(lines) if line.startswith("This notebook re-checks"))]


def test_markdown_from_input_has_no_live_markup(tmp_path):
    """Whatever renders it: outside code spans every ASCII punctuation character that Markdown reads is
    backslash-escaped, and '$' and '\\' appear only inside code spans (a notebook's math renderer runs on the
    rendered page and takes an escaped '\\$' as math all the same), and no URL scheme or 'www.' survives whole."""
    lines = payload_lines(title_cell(tmp_path))
    assert lines[0].startswith("# ")
    text = "\n".join([lines[0][2:]] + lines[1:])
    outside_code = re.sub(r"(?<!\\)(`+)(?!`).*?(?<!`)\1(?!`)", "", text)
    unescaped = re.sub(r"\\[!-/:-@\[-`{-~]", "", outside_code)
    assert re.findall(r"[`*_{}\[\]()#+\-.!|<>$~&:=\\]", unescaped) == []
    for scheme in ("http://", "https://", "javascript:", "www.", "@host."):
        assert scheme not in text
    assert all(not line.startswith((" ", "\t")) for line in lines)


def test_markdown_from_input_renders_as_literal_text(tmp_path):
    markdown_it = pytest.importorskip("markdown_it", reason="no Markdown renderer installed (markdown-it-py)")
    renderer = markdown_it.MarkdownIt("commonmark").enable(["table", "strikethrough"])
    source = title_cell(tmp_path)
    rendered = renderer.render("\n".join(payload_lines(source)))
    tags = re.findall(r"<(/?[a-z0-9]+)", rendered)
    assert set(tags) <= {"h1", "/h1", "p", "/p", "code", "/code"}, rendered
    assert tags.count("h1") == 1  # stepper's own heading, the title
    title_html, notes_html = rendered.split("</h1>")
    literal = lambda part: html.unescape(re.sub(r"<[^>]+>", "", part))  # noqa: E731
    assert literal(title_html) == MD_TITLE
    assert literal(notes_html).split() == " ".join(line.strip() for line in MD_NOTES.splitlines()).split()
    whole = renderer.render(source)  # the rest of the cell is stepper's own Markdown
    assert not re.search(r"<(?:a|img)\b|<[a-z][^>]*\s(?:href|src)=", whole)


@pytest.mark.slow
def test_a_notebook_with_hostile_markdown_still_runs(tmp_path):
    from nbclient import NotebookClient
    nb = nbformat.reads(notebook_text(derive(load_metric(sphere_file(tmp_path, MD_TITLE, MD_NOTES + NOTES)))),
                        as_version=4)
    NotebookClient(nb, timeout=600, kernel_name="python3", resources={"metadata": {"path": str(tmp_path)}}).execute()
    assert "recorded steps were recomputed and agree" in nb.cells[-1].outputs[0]["text"]
