"""Appendices that go into a paper: heading level, link anchors of their own, one- and two-column fit.

A paper that ``\\input``s the appendices of two metrics must compile with no
overfull box and no "destination with the same identifier" warning from
hyperref, with the headings at the level asked for (common practice: an
appendix inside a paper's own appendix section starts at subsection level).
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from stepper import cli

from test_detail_levels import PAPER as LEVELS_PAPER

ROOT = Path(__file__).resolve().parent.parent
EXAMPLES = ROOT / "examples"
PAIR = ("spinning_black_hole", "wormhole_passage")

#: The detail-level tests' article (graphicx included, for the plots), with the two appendices input.
PAPER = LEVELS_PAPER.replace("%(inputs)s", "\\input{first}\n\\input{second}")

needs_tex = pytest.mark.skipif(shutil.which("pdflatex") is None, reason="pdflatex is not installed")


def appendix(tmp_path: Path, name: str, *options: str) -> str:
    folder = tmp_path / name
    assert cli.main(["derive", str(EXAMPLES / f"{name}.toml"), "-o", str(folder), "--formats", "appendix",
                     "--quiet", *options]) == 0
    return (folder / "appendix.tex").read_text(encoding="utf-8")


def compile_paper(tmp_path: Path, columns: str, first: str, second: str) -> str:
    paper = tmp_path / f"paper-{columns}"
    paper.mkdir()
    (paper / "first.tex").write_text(first, encoding="utf-8")
    (paper / "second.tex").write_text(second, encoding="utf-8")
    (paper / "paper.tex").write_text(PAPER % {"columns": columns}, encoding="utf-8")
    run = subprocess.run(["pdflatex", "-interaction=nonstopmode", "-halt-on-error", "-no-shell-escape", "paper.tex"],
                         cwd=paper, capture_output=True, timeout=300)
    log = (paper / "paper.log").read_text(encoding="utf-8", errors="replace")
    assert run.returncode == 0, log[-3000:]
    return log


@pytest.fixture(scope="module")
def subsection_appendices(tmp_path_factory) -> tuple[str, str]:
    base = tmp_path_factory.mktemp("appendices")
    return tuple(appendix(base, name, "--appendix-heading", "subsection") for name in PAIR)


@needs_tex
@pytest.mark.slow
@pytest.mark.parametrize("columns", ["onecolumn", "twocolumn"])
def test_two_appendices_share_a_paper(tmp_path, subsection_appendices, columns):
    log = compile_paper(tmp_path, columns, *subsection_appendices)
    assert "Overfull" not in log, [line for line in log.splitlines() if "Overfull" in line]
    assert "same identifier" not in log


def test_headings_start_at_the_level_asked_for(subsection_appendices):
    for text in subsection_appendices:
        assert re.search(r"^\\subsection\*?\{", text, re.M)
        assert not re.search(r"^\\section\*?\{", text, re.M)


def test_each_metric_has_its_own_anchors(subsection_appendices):
    prefixes = [set(re.findall(r"\\hypertarget\{(stepper-[a-z0-9]+-[0-9a-f]{6}-)", text))
                for text in subsection_appendices]
    assert all(len(found) == 1 for found in prefixes), prefixes
    assert prefixes[0] != prefixes[1]
    # every link points at a target of the same appendix
    for text in subsection_appendices:
        targets = set(re.findall(r"\\hypertarget\{([^}]*)\}", text))
        assert set(re.findall(r"\\hyperlink\{([^}]*)\}", text)) <= targets


def test_anchor_prefix_and_heading_options(tmp_path, capsys):
    text = appendix(tmp_path, "round_sphere", "--anchor-prefix", "app-b:", "--appendix-heading", "chapter")
    assert r"\hypertarget{app-b:step1}" in text
    assert re.search(r"^\\chapter\*?\{The metric\}", text, re.M)
    assert not re.search(r"^\\section\*?\{The metric\}", text, re.M)
    capsys.readouterr()
    assert cli.main(["derive", str(EXAMPLES / "round_sphere.toml"), "-o", str(tmp_path / "bad"),
                     "--anchor-prefix", "x}\\input{y"]) == 2
    assert "--anchor-prefix may hold only" in capsys.readouterr().err
    assert not (tmp_path / "bad").exists()


def test_the_default_prefix_is_the_same_on_every_run(tmp_path):
    assert appendix(tmp_path / "one", "round_sphere") == appendix(tmp_path / "two", "round_sphere")
