"""Detail levels of the LaTeX report and appendix: summary, condensed, full (``--detail``).

The level is a setting of the exporter, not of the trace: one trace renders at every level.  A summary
shows no step, so it may not link to one (hyperref warns about a link whose target "has been referenced but
does not exist"); a condensed derivation keeps every step and every numbered result of the full one but not
the general formulas, substitutions and simplification trails.  Appendices at every level go into one- and
two-column articles with no overfull box and no duplicate link target (common practice for a paper's
appendix: it must build cleanly inside the paper's own class and columns).
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from stepper import cli
from stepper.exporters import AppendixExporter, PdfExporter, ReportExporter
from stepper.record import Verdict

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
QUICK = "wormhole_passage"   # a matter example: energy-condition tables, verdicts, frame steps
LEVELS = ("summary", "condensed", "full")

needs_tex = pytest.mark.skipif(shutil.which("pdflatex") is None, reason="pdflatex is not installed")

PAPER = r"""\documentclass[%(columns)s]{article}
\usepackage[T1]{fontenc}
\usepackage{lmodern}
\usepackage{amsmath,amssymb}
\usepackage{graphicx}
\usepackage{hyperref}
\begin{document}
\section{Introduction}
The derivations are in the appendix.
\appendix
\section{Derivations}
%(inputs)s
\end{document}
"""


def hyperlinks(tex: str) -> set[str]:
    return set(re.findall(r"\\hyperlink\{([^}]*)\}", tex))


def hypertargets(tex: str) -> set[str]:
    return set(re.findall(r"\\hypertarget\{([^}]*)\}", tex))


def step_targets(tex: str, prefix: str = "") -> set[str]:
    return set(re.findall(r"\\hypertarget\{" + re.escape(prefix) + r"(step\d+)\}", tex))


def result_labels(tex: str) -> set[str]:
    return set(re.findall(r"\\label\{[^}]*eq:(step[\d.]+)\}", tex))


@pytest.fixture(scope="module")
def quick_levels(derived):
    d = derived(QUICK)
    return {level: ReportExporter(detail=level).export(d) for level in LEVELS}


def test_full_is_the_default(derived, quick_levels):
    d = derived(QUICK)
    assert ReportExporter().export(d) == quick_levels["full"]
    assert AppendixExporter().export(d) == AppendixExporter(detail="full").export(d)


def test_an_unknown_level_is_refused_by_the_exporter():
    with pytest.raises(ValueError):
        ReportExporter(detail="short")
    with pytest.raises(ValueError):
        AppendixExporter(detail="")


def test_summary_shows_no_step_and_links_to_none(derived, quick_levels):
    tex = quick_levels["summary"]
    assert not step_targets(tex)
    assert not result_labels(tex)
    assert hyperlinks(tex) <= hypertargets(tex)
    for heading in ("The metric", "Summary of the results", "Conventions", "Checks that were run"):
        assert re.search(r"\\section\{" + heading + r"\}", tex), heading
    assert "General formula" not in tex and r"\textbf{Step " not in tex
    assert "-{}-detail full" in tex  # says how to get the whole derivation
    # every verdict of the trace is still named, with its step number written out
    d = derived(QUICK)
    verdict_steps = [i for i, s in enumerate(d.steps, 1) if s.stage != "audit" and isinstance(s.result, Verdict)]
    assert verdict_steps
    for number in verdict_steps:
        assert f"Step~{number}:" in tex, number


def test_condensed_keeps_every_step_and_result_of_the_full_level(quick_levels):
    full, condensed = quick_levels["full"], quick_levels["condensed"]
    assert step_targets(condensed) == step_targets(full) != set()
    assert result_labels(condensed) == result_labels(full) != set()
    assert hyperlinks(condensed) <= hypertargets(condensed)
    assert "General formula" in full and "After simplification" in full
    for trail in ("General formula", "With this metric's quantities", "Before simplification",
                  "After simplification", "is not reproduced"):
        assert trail not in condensed, trail
    # verdicts and energy-condition tables stay
    assert condensed.count(r"\textbf{Verdict:}") == full.count(r"\textbf{Verdict:}") > 0
    assert condensed.count(r"\begin{tabular}") == full.count(r"\begin{tabular}") > 0
    assert "-{}-detail full" in condensed and "-{}-detail full" not in full


def test_levels_grow_from_summary_to_full(quick_levels):
    assert len(quick_levels["summary"]) < len(quick_levels["condensed"]) < len(quick_levels["full"])


def test_audit_section_is_kept_at_summary_level(derived):
    d = derived("seminar_notes")
    summary = ReportExporter(detail="summary").export(d)
    assert r"\section{Audit:" in summary
    assert summary.count(r"\textbf{Claim ") == len(d.results["audit"]["claims"])
    claims = {f"step{i}" for i, s in enumerate(d.steps, 1) if s.kind == "claim"}
    assert step_targets(summary) == claims  # the claims' own targets, no step of the derivation
    assert hyperlinks(summary) <= hypertargets(summary)


def derive_cli(tmp_path: Path, name: str, folder: str, *options: str) -> int:
    return cli.main(["derive", str(EXAMPLES / f"{name}.toml"), "-o", str(tmp_path / folder), "--quiet", *options])


@pytest.mark.parametrize("command", ["derive", "audit", "render"])
def test_an_unknown_level_is_refused_on_the_command_line(tmp_path, capsys, command):
    source = {"derive": EXAMPLES / "round_sphere.toml", "audit": EXAMPLES / "claims" / "seminar_notes.toml",
              "render": tmp_path / "trace.json"}[command]
    with pytest.raises(SystemExit) as stop:
        cli.main([command, str(source), "-o", str(tmp_path / "out"), "--detail", "everything"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert len(err.strip().splitlines()) == 1 and "--detail" in err and "summary" in err, err
    assert not (tmp_path / "out").exists()


def test_render_at_another_level_from_the_same_trace(tmp_path):
    assert derive_cli(tmp_path, "round_sphere", "full", "--formats", "trace,tex,appendix") == 0
    assert derive_cli(tmp_path, "round_sphere", "summary", "--formats", "trace,tex,appendix",
                      "--detail", "summary") == 0
    # the level is not part of the trace
    assert (tmp_path / "full" / "trace.json").read_bytes() == (tmp_path / "summary" / "trace.json").read_bytes()
    trace = str(tmp_path / "full" / "trace.json")
    assert cli.main(["render", trace, "-o", str(tmp_path / "again"), "--formats", "tex,appendix",
                     "--detail", "summary", "--quiet"]) == 0
    for name in ("report.tex", "appendix.tex"):
        again = (tmp_path / "again" / name).read_bytes()
        assert again == (tmp_path / "summary" / name).read_bytes()
        assert again != (tmp_path / "full" / name).read_bytes()
    appendix = (tmp_path / "again" / "appendix.tex").read_text(encoding="utf-8")
    assert not re.search(r"\\hypertarget\{[^}]*step\d+\}", appendix)
    assert hyperlinks(appendix) <= hypertargets(appendix)


# TeX runs -----------------------------------------------------------------------------------------


def appendix(tmp_path: Path, name: str, level: str) -> Path:
    """The folder holding appendix.tex at that level (and any figure files it includes)."""
    folder = f"{name}-{level}"
    assert derive_cli(tmp_path, name, folder, "--formats", "appendix", "--appendix-heading", "subsection",
                      "--detail", level) == 0
    return tmp_path / folder


def compile_paper(tmp_path: Path, columns: str, *appendices: Path) -> tuple[str, int]:
    """Compile a paper that inputs the appendices (twice, so that cross-references settle); its log and
    its number of pages."""
    paper = tmp_path / f"paper-{columns}-{len(appendices)}"
    paper.mkdir()
    for i, folder in enumerate(appendices):
        for file in sorted(folder.iterdir()):
            shutil.copyfile(file, paper / (f"part{i}.tex" if file.name == "appendix.tex" else file.name))
    inputs = "\n".join(f"\\input{{part{i}}}" for i in range(len(appendices)))
    (paper / "paper.tex").write_text(PAPER % {"columns": columns, "inputs": inputs}, encoding="utf-8")
    for _ in range(2):
        run = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "-no-shell-escape",
                              "paper.tex"], cwd=paper, capture_output=True, timeout=300)
        log = (paper / "paper.log").read_text(encoding="utf-8", errors="replace")
        assert run.returncode == 0, log[-3000:]
    pages = re.search(r"Output written on paper\.pdf \((\d+) pages?", log)
    assert pages, log[-2000:]
    return log, int(pages.group(1))


def assert_clean(log: str) -> None:
    assert "Overfull" not in log, [line for line in log.splitlines() if "Overfull" in line]
    assert "same identifier" not in log
    assert "does not exist" not in log, [line for line in log.splitlines() if "does not exist" in line]
    assert not re.search(r"Reference .* undefined|undefined references", log)


@pytest.fixture(scope="module")
def kerr_appendices(tmp_path_factory):
    base = tmp_path_factory.mktemp("kerr-levels")
    return {level: appendix(base, "spinning_black_hole", level) for level in LEVELS}


@needs_tex
@pytest.mark.slow
@pytest.mark.parametrize("columns", ["onecolumn", "twocolumn"])
def test_summary_of_the_rotating_black_hole_fits_in_a_few_pages(tmp_path, kerr_appendices, columns):
    log, pages = compile_paper(tmp_path, columns, kerr_appendices["summary"])
    assert_clean(log)
    assert pages <= 5, pages  # the full derivation runs to about 45 pages


@needs_tex
@pytest.mark.slow
@pytest.mark.parametrize("level", ["summary", "condensed"])
@pytest.mark.parametrize("columns", ["onecolumn", "twocolumn"])
def test_two_appendices_at_a_level_share_a_paper(tmp_path, kerr_appendices, level, columns):
    wormhole = appendix(tmp_path, "wormhole_passage", level)
    log, _ = compile_paper(tmp_path, columns, kerr_appendices[level], wormhole)
    assert_clean(log)


@needs_tex
@pytest.mark.slow
def test_condensed_is_shorter_than_full_and_longer_than_summary(tmp_path, kerr_appendices):
    pages = {}
    for level in LEVELS:
        (tmp_path / level).mkdir()
        pages[level] = compile_paper(tmp_path / level, "onecolumn", kerr_appendices[level])[1]
    assert pages["summary"] < pages["condensed"] < pages["full"], pages
    assert pages["condensed"] <= 0.8 * pages["full"], pages


@needs_tex
@pytest.mark.slow
def test_summary_report_pdf_has_no_dangling_link(derived):
    exporter = PdfExporter(detail="summary")
    exporter.export(derived("spinning_black_hole"))
    assert "does not exist" not in exporter.log
    assert "Overfull" not in exporter.log
